#include "monitors/calibrate.h"

#include <algorithm>
#include <cmath>
#include <limits>
#include <map>
#include <mutex>
#include <sstream>

namespace monitors {
namespace {

constexpr double kPi = 3.14159265358979323846;

// xoshiro256** seeded by splitmix64, with Marsaglia's polar method for normals: fixed
// algorithms, so a seed gives the same numbers with every standard library.
class Random {
 public:
  explicit Random(std::uint64_t seed) {
    for (auto& w : s_) {
      seed += 0x9e3779b97f4a7c15ULL;
      std::uint64_t z = seed;
      z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
      z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
      w = z ^ (z >> 31);
    }
  }
  std::uint64_t Next() {
    const std::uint64_t result = Rotl(s_[1] * 5, 7) * 9;
    const std::uint64_t t = s_[1] << 17;
    s_[2] ^= s_[0];
    s_[3] ^= s_[1];
    s_[1] ^= s_[2];
    s_[0] ^= s_[3];
    s_[2] ^= t;
    s_[3] = Rotl(s_[3], 45);
    return result;
  }
  double Uniform() { return static_cast<double>(Next() >> 11) * 0x1.0p-53; }
  double Normal() {
    if (has_spare_) {
      has_spare_ = false;
      return spare_;
    }
    double u, v, s;
    do {
      u = 2.0 * Uniform() - 1.0;
      v = 2.0 * Uniform() - 1.0;
      s = u * u + v * v;
    } while (s >= 1.0 || s == 0.0);
    const double f = std::sqrt(-2.0 * std::log(s) / s);
    spare_ = v * f;
    has_spare_ = true;
    return u * f;
  }

 private:
  static std::uint64_t Rotl(std::uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }
  std::uint64_t s_[4];
  double spare_ = 0.0;
  bool has_spare_ = false;
};

constexpr double kLevel = 100.0;
constexpr double kNoise = 10.0;
constexpr double kSeasonAdd = 15.0;
constexpr double kSeasonMul = 0.15;

// Limits by age (calibrate.h): young bands double in width from kFirstBand periods up to
// kSteadyFrom; each is calibrated on enough paths for kYoungEvents expected false alerts at the
// budget, but on at most about kMaxYoungPaths (a wider first band keeps large budgets cheap).
// The steady band, ages kSteadyFrom to kSteadyFrom + every, for kSteadyEvents.
constexpr int kFirstBand = 4;
constexpr int kSteadyFrom = 128;
constexpr double kYoungEvents = 100.0;
constexpr double kMaxYoungPaths = 200000.0;
constexpr double kSteadyEvents = 200.0;

double SeasonShape(long t, int m) {
  return std::sin(2.0 * kPi * static_cast<double>(t % m) / m);
}

// The in-control process of a policy's method (calibrate.h), its season shapes computed once.
class InControl {
 public:
  explicit InControl(const PolicySpec& p)
      : method_(p.method), m_(std::max(1, p.constants.season_length)), demand_(p.in_control) {
    for (int j = 0; j < m_; ++j) shape_.push_back(SeasonShape(j, m_));
  }
  double Value(long t, Random& rng) const {
    switch (method_) {
      case Method::kSes:
      case Method::kHolt:
      case Method::kDamped:
        return kLevel + kNoise * rng.Normal();
      case Method::kSeasonalAdd:
        return kLevel + kSeasonAdd * Shape(t) + kNoise * rng.Normal();
      case Method::kSeasonalMul:
        return (kLevel + kNoise * rng.Normal()) * (1.0 + kSeasonMul * Shape(t));
      case Method::kCroston:
      case Method::kSba: {
        const bool demand = rng.Uniform() < demand_.probability;
        const double size = std::max(1.0, demand_.size_mean + demand_.size_sd * rng.Normal());
        return demand ? size : 0.0;
      }
    }
    return kLevel;
  }

 private:
  double Shape(long t) const { return shape_[static_cast<std::size_t>(t % m_)]; }
  Method method_;
  int m_;
  PolicySpec::InControlDemand demand_;
  std::vector<double> shape_;
};

// The policy as the simulation runs it: only the watched rule; the true start state when asked.
PolicySpec InControlPolicy(const PolicySpec& policy, std::size_t rule, bool true_start) {
  PolicySpec p = policy;
  p.rules = {policy.rules[rule]};
  p.gaps = GapRule::kZero;
  if (true_start && !IsIntermittent(p.method)) {
    p.start = StartSpec{};
    p.start.kind = StartKind::kExplicit;
    p.start.level = kLevel;
    p.start.trend = 0.0;
    if (IsSeasonal(p.method)) {
      const int m = p.constants.season_length;
      p.start.season.resize(static_cast<std::size_t>(m));
      for (int j = 0; j < m; ++j)
        p.start.season[static_cast<std::size_t>(j)] = p.method == Method::kSeasonalAdd
                                                          ? kSeasonAdd * SeasonShape(j, m)
                                                          : 1.0 + kSeasonMul * SeasonShape(j, m);
    }
  }
  return p;
}

std::uint64_t Mix(std::uint64_t seed, std::uint64_t path) {
  return seed ^ (path * 0xd1b54a32d192ed03ULL + 0x8cb92ba72f3d8dd7ULL);
}

SignalSample EmptySample(const SimulationSize& size) {
  SignalSample out;
  out.paths = size.paths;
  out.burn_in = size.burn_in;
  out.periods = size.periods;
  out.x.resize(static_cast<std::size_t>(size.paths) * (size.burn_in + size.periods));
  return out;
}

// The excursion of a value, NaN when undefined.
float ExcursionOrNaN(Direction d, std::optional<double> v) {
  return v ? static_cast<float>(Excursion(d, *v)) : std::numeric_limits<float>::quiet_NaN();
}

}  // namespace

SignalSample SampleInControl(const PolicySpec& policy, std::size_t rule,
                             const SimulationSize& size) {
  const PolicySpec p = InControlPolicy(policy, rule, size.true_start);
  const RuleSpec& watched = p.rules[0];
  SignalSample out = EmptySample(size);
  const long per_path = size.burn_in + size.periods;
  const InControl process(p);
  for (int path = 0; path < size.paths; ++path) {
    Random rng(Mix(size.seed, static_cast<std::uint64_t>(path)));
    SeriesState state = NewSeriesState(p);
    StepResult r;
    float* x = out.x.data() + static_cast<std::size_t>(path) * per_path;
    for (long t = 0; t < per_path; ++t) {
      const double y = process.Value(t, rng);
      std::optional<double> v;
      if (Step(p, state, t + 1, y, r) == StepStatus::kOk) v = RuleValue(watched, r, state);
      x[t] = ExcursionOrNaN(watched.direction, v);
    }
  }
  return out;
}

SignalSample SampleIidErrors(double beta, SignalKind signal, Direction direction,
                             const SimulationSize& size) {
  SignalSample out = EmptySample(size);
  const long per_path = size.burn_in + size.periods;
  for (int path = 0; path < size.paths; ++path) {
    Random rng(Mix(size.seed, static_cast<std::uint64_t>(path)));
    ErrorStats s;
    s.mad = std::sqrt(2.0 / kPi);
    float* x = out.x.data() + static_cast<std::size_t>(path) * per_path;
    for (long t = 0; t < per_path; ++t) {
      UpdateErrorStats(s, beta, rng.Normal());
      const std::optional<double> v =
          signal == SignalKind::kCusum ? CusumSignal(s) : TriggSignal(s);
      x[t] = ExcursionOrNaN(direction, v);
    }
  }
  return out;
}

double EpisodeRate(const SignalSample& sample, const RuleSpec& rule) {
  RuleSpec r = rule;
  r.direction = Direction::kUnder;  // the sample already holds excursions
  long episodes = 0;
  for (int path = 0; path < sample.paths; ++path) {
    const float* x = sample.path(path);
    RuleState st;
    for (int t = 0; t < sample.burn_in + sample.periods; ++t) {
      std::optional<double> v;
      if (!std::isnan(x[t])) v = x[t];
      EvaluateRule(r, st, v);
      if (AdvanceEpisode(r, st, v).opened && t >= sample.burn_in) ++episodes;
    }
  }
  const double counted = static_cast<double>(sample.paths) * sample.periods;
  return counted > 0 ? static_cast<double>(episodes) / counted : 0.0;
}

std::vector<int> RunLengths(const SignalSample& sample, double limit) {
  std::vector<int> out;
  const int n = sample.burn_in + sample.periods;
  for (int path = 0; path < sample.paths; ++path) {
    const float* x = sample.path(path);
    for (int t = 0; t < n; ++t)
      if (!std::isnan(x[t]) && x[t] > limit) {
        out.push_back(t + 1);
        break;
      }
  }
  return out;
}

namespace {

// Several rules' excursions by age past the warm-up: path p holds ages [0, length[p]) of each.
struct AgeSample {
  std::vector<std::size_t> offset;  // where each path begins in x[k]
  std::vector<int> length;
  std::vector<std::vector<float>> x;  // per watched rule
  const float* path(std::size_t k, std::size_t p) const { return x[k].data() + offset[p]; }
};

// Runs path p of the in-control process (the same numbers as SampleInControl's path p) until
// length[p] ages past the warm-up are recorded, for every rule of `p`; an age whose signal is
// undefined holds NaN.
void SamplePathByAge(const PolicySpec& p, const InControl& process, std::uint64_t seed,
                     std::size_t path, AgeSample& out) {
  const int length = out.length[path];
  Random rng(Mix(seed, path));
  SeriesState state = NewSeriesState(p);
  StepResult r;
  int recorded = 0;
  // Croston and sba forecast from the first demand on; a path that could not start in this many
  // periods leaves the rest undefined (at a demand probability of 1/3: never).
  const long cap = 100L * (StartWindow(p.method, p.start) + p.warmup + length) + 10000;
  for (long t = 0; recorded < length && t < cap; ++t) {
    const double y = process.Value(t, rng);
    if (Step(p, state, t + 1, y, r) != StepStatus::kOk || !r.has_forecast ||
        state.forecasts <= p.warmup)
      continue;
    for (std::size_t k = 0; k < p.rules.size(); ++k)
      out.x[k][out.offset[path] + static_cast<std::size_t>(recorded)] =
          ExcursionOrNaN(p.rules[k].direction, RuleValue(p.rules[k], r, state));
    ++recorded;
  }
  for (; recorded < length; ++recorded)
    for (auto& x : out.x)
      x[out.offset[path] + static_cast<std::size_t>(recorded)] =
          std::numeric_limits<float>::quiet_NaN();
}

AgeSample SampleByAge(const PolicySpec& p, std::uint64_t seed, std::vector<int> length) {
  AgeSample out;
  out.length = std::move(length);
  out.offset.resize(out.length.size());
  std::size_t total = 0;
  for (std::size_t i = 0; i < out.length.size(); ++i) {
    out.offset[i] = total;
    total += static_cast<std::size_t>(out.length[i]);
  }
  out.x.assign(p.rules.size(), std::vector<float>(total));
  const InControl process(p);
  for (std::size_t i = 0; i < out.length.size(); ++i) SamplePathByAge(p, process, seed, i, out);
  return out;
}

// One stretch of ages calibrated on its own: [from, until) watched on `paths` paths.
struct Band {
  int from = 0, until = 0;
  std::size_t paths = 0;
};

// The bands of a budget of one false alert per `every` periods (calibrate.h): doubling young
// bands up to kSteadyFrom, each with enough paths for kYoungEvents expected false alerts, then
// the steady band over `every` periods with at least `steady_paths` paths.
std::vector<Band> Bands(double every, int steady_paths) {
  const double periods = std::ceil(every);
  const auto steady_n = static_cast<std::size_t>(
      std::max<double>(steady_paths, std::ceil(kSteadyEvents * every / periods)));
  // The first band is wide enough that it needs at most kMaxYoungPaths paths.
  int width = kFirstBand;
  while (width < kSteadyFrom && kYoungEvents * every / width > kMaxYoungPaths) width *= 2;
  std::vector<Band> bands;
  for (int from = 0; from < kSteadyFrom; from += width, width = from) {
    Band b;
    b.from = from;
    b.until = std::min(kSteadyFrom, from + width);
    b.paths = std::max(
        steady_n, static_cast<std::size_t>(std::ceil(kYoungEvents * every / (b.until - b.from))));
    bands.push_back(b);
  }
  bands.push_back({kSteadyFrom, kSteadyFrom + static_cast<int>(periods), steady_n});
  return bands;
}

std::string CacheKey(const PolicySpec& p, std::size_t rule, double every, double clear_fraction,
                     const SimulationSize& size) {
  const RuleSpec& r = p.rules[rule];
  std::ostringstream k;
  k.precision(17);
  k << static_cast<int>(p.method) << ' ' << p.constants.alpha << ' ' << p.constants.beta << ' '
    << p.constants.phi << ' ' << p.constants.gamma << ' ' << p.constants.season_length << ' '
    << p.adaptive.enabled << ' ' << p.adaptive.floor << ' ' << p.adaptive.cap << ' '
    << p.adaptive.lagged << ' ' << p.signal_beta << ' ' << p.initial_mad << ' ' << p.warmup << ' '
    << static_cast<int>(p.start.kind) << ' ' << p.start.count << ' ' << p.in_control.probability
    << ' ' << p.in_control.size_mean << ' ' << p.in_control.size_sd << ' '
    << static_cast<int>(r.signal) << ' ' << static_cast<int>(r.direction) << ' ' << r.persistence
    << ' ' << r.periods << ' ' << r.resolve_after << ' ' << every << ' ' << clear_fraction << ' '
    << size.paths << ' ' << size.seed;
  return k.str();
}

// The smallest limit of `rule` (clear at clear_fraction of it) whose episodes opened in `band`
// are at most `target` per series-period, starting every path from its rule state in `states`.
// NaN when the signal is never beyond 0 in the band.
double BandLimit(const AgeSample& sample, std::size_t k, const Band& band,
                 const std::vector<RuleState>& states, RuleSpec r, double clear_fraction,
                 double target, double* rate) {
  r.direction = Direction::kUnder;  // the sample holds excursions
  r.young.clear();
  float top = 0.0f;
  for (std::size_t p = 0; p < band.paths; ++p)
    for (int a = band.from; a < band.until; ++a) {
      const float v = sample.path(k, p)[a];
      if (!std::isnan(v)) top = std::max(top, v);
    }
  if (!(top > 0.0f)) return std::numeric_limits<double>::quiet_NaN();
  const double counted = static_cast<double>(band.paths) * (band.until - band.from);
  auto rate_at = [&](double limit) {
    r.limit = limit;
    r.clear = clear_fraction * limit;
    long episodes = 0;
    for (std::size_t p = 0; p < band.paths; ++p) {
      RuleState st = states[p];
      const float* x = sample.path(k, p);
      for (int a = band.from; a < band.until; ++a) {
        std::optional<double> v;
        if (!std::isnan(x[a])) v = x[a];
        EvaluateRule(r, st, v);
        if (AdvanceEpisode(r, st, v).opened) ++episodes;
      }
    }
    return static_cast<double>(episodes) / counted;
  };
  // The rate is not monotone near zero (a limit of 0 makes one endless episode), so halve down
  // from the largest value seen (a rare start-up outlier may make it huge) to the first limit
  // whose rate is over budget, then bisect the step above it.
  double lo = 0.0, hi = static_cast<double>(top);
  for (int halvings = 0;; ++halvings) {
    const double at = hi / 2;
    if (rate_at(at) > target) {
      lo = at;
      break;
    }
    hi = at;
    if (halvings == 60) {
      lo = hi = 0.0;
      break;
    }
  }
  for (int i = 0; i < 30 && hi - lo > 1e-3 * hi; ++i) {
    const double mid = 0.5 * (lo + hi);
    if (rate_at(mid) <= target)
      hi = mid;
    else
      lo = mid;
  }
  *rate = rate_at(hi);
  return hi;
}

// Carries each of the first `paths` rule states through `band` at `limit`.
void Advance(const AgeSample& sample, std::size_t k, const Band& band, std::size_t paths,
             RuleSpec r, double limit, double clear_fraction, std::vector<RuleState>& states) {
  r.direction = Direction::kUnder;
  r.young.clear();
  r.limit = limit;
  r.clear = clear_fraction * limit;
  for (std::size_t p = 0; p < paths; ++p) {
    const float* x = sample.path(k, p);
    for (int a = band.from; a < band.until; ++a) {
      std::optional<double> v;
      if (!std::isnan(x[a])) v = x[a];
      EvaluateRule(r, states[p], v);
      AdvanceEpisode(r, states[p], v);
    }
  }
}

}  // namespace

namespace {

// The limits by age of the sample's rule k from its bands.
Calibration FromSample(const AgeSample& sample, std::size_t k, const std::vector<Band>& bands,
                       const RuleSpec& spec, double every, double clear_fraction) {
  Calibration c;
  std::vector<RuleState> states(bands.front().paths);
  std::vector<double> limits(bands.size());
  std::vector<double> rates(bands.size());
  for (std::size_t b = 0; b < bands.size(); ++b) {
    limits[b] =
        BandLimit(sample, k, bands[b], states, spec, clear_fraction, 1.0 / every, &rates[b]);
    if (b + 1 < bands.size())
      Advance(sample, k, bands[b], bands[b + 1].paths, spec,
              std::isnan(limits[b]) ? 0.0 : limits[b], clear_fraction, states);
  }
  if (std::isnan(limits.back()) || !(limits.back() > 0.0)) {
    c.problem = "the signal never left zero in the simulation";
    return c;
  }
  // A young band where the signal is never defined takes the limit of the next band that has one.
  for (std::size_t b = bands.size() - 1; b-- > 0;)
    if (std::isnan(limits[b])) {
      limits[b] = limits[b + 1];
      rates[b] = 0.0;
    }
  c.ok = true;
  c.limit = limits.back();
  c.rate = rates.back();
  for (std::size_t b = 0; b + 1 < bands.size(); ++b) {
    c.young.push_back({bands[b].until, limits[b], clear_fraction * limits[b]});
    c.young_rates.push_back(rates[b]);
  }
  return c;
}

}  // namespace

std::vector<Calibration> CalibrateRules(const PolicySpec& policy,
                                        const std::vector<RuleBudget>& budgets,
                                        const SimulationSize& size) {
  static std::mutex mu;
  static std::map<std::string, Calibration> cache;
  std::vector<Calibration> out(budgets.size());
  std::vector<std::string> keys(budgets.size());
  std::vector<std::size_t> todo;  // budgets to simulate
  for (std::size_t i = 0; i < budgets.size(); ++i) {
    const RuleBudget& b = budgets[i];
    Calibration& c = out[i];
    if (b.rule >= policy.rules.size() || !(b.every >= 1.0) || !(b.every <= 1e7) ||
        !(b.clear_fraction > 0.0) || b.clear_fraction > 1.0) {
      c.problem =
          "calibration needs a rule, a budget of 1 to 10^7 periods and a clear fraction in "
          "(0, 1]";
      continue;
    }
    const SignalKind signal = policy.rules[b.rule].signal;
    if (!StepSignal(signal) || signal == SignalKind::kAlphaAtCap) {
      c.problem = std::string("a ") + SignalKindName(signal) +
                  " rule cannot take a false-alarm budget; give it a limit";
      continue;
    }
    keys[i] = CacheKey(policy, b.rule, b.every, b.clear_fraction, size);
    std::lock_guard lock(mu);
    if (auto it = cache.find(keys[i]); it != cache.end())
      c = it->second;
    else
      todo.push_back(i);
  }
  if (todo.empty()) return out;
  // One simulation for every rule to derive; path p lives to the end of the last band of any
  // rule that watches it (bands watch fewer paths as they get older and wider, so every band's
  // paths are the first ones).
  const int steady_paths = std::max(size.paths, 200);
  std::vector<std::vector<Band>> bands;
  PolicySpec p = InControlPolicy(policy, budgets[todo[0]].rule, false);
  p.rules.clear();
  std::vector<int> length;
  for (std::size_t i : todo) {
    bands.push_back(Bands(budgets[i].every, steady_paths));
    p.rules.push_back(policy.rules[budgets[i].rule]);
    if (length.size() < bands.back().front().paths) length.resize(bands.back().front().paths, 0);
    for (const Band& band : bands.back())
      for (std::size_t q = 0; q < band.paths; ++q) length[q] = std::max(length[q], band.until);
  }
  const AgeSample sample = SampleByAge(p, size.seed, std::move(length));
  for (std::size_t k = 0; k < todo.size(); ++k) {
    const RuleBudget& b = budgets[todo[k]];
    out[todo[k]] = FromSample(sample, k, bands[k], p.rules[k], b.every, b.clear_fraction);
    std::lock_guard lock(mu);
    cache.emplace(keys[todo[k]], out[todo[k]]);
  }
  return out;
}

Calibration CalibrateRule(const PolicySpec& policy, std::size_t rule, double every,
                          double clear_fraction, const SimulationSize& size) {
  return CalibrateRules(policy, {RuleBudget{rule, every, clear_fraction}}, size).front();
}

double PeriodsPerWeek(PeriodKind kind) {
  switch (kind) {
    case PeriodKind::kDay:
      return 7.0;
    case PeriodKind::kWeek:
      return 1.0;
    case PeriodKind::kMonth:
      return 12.0 / 52.1775;
  }
  return 1.0;
}

}  // namespace monitors
