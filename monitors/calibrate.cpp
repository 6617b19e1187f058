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

double SeasonShape(long t, int m) {
  return std::sin(2.0 * kPi * static_cast<double>(t % m) / m);
}

double InControlValue(Method method, int m, long t, Random& rng) {
  switch (method) {
    case Method::kSes:
    case Method::kHolt:
    case Method::kDamped:
      return kLevel + kNoise * rng.Normal();
    case Method::kSeasonalAdd:
      return kLevel + kSeasonAdd * SeasonShape(t, m) + kNoise * rng.Normal();
    case Method::kSeasonalMul:
      return (kLevel + kNoise * rng.Normal()) * (1.0 + kSeasonMul * SeasonShape(t, m));
    case Method::kCroston:
    case Method::kSba: {
      const bool demand = rng.Uniform() < 1.0 / 3.0;
      const double size = std::max(1.0, 5.0 + 2.0 * rng.Normal());
      return demand ? size : 0.0;
    }
  }
  return kLevel;
}

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
  const int m = std::max(1, p.constants.season_length);
  for (int path = 0; path < size.paths; ++path) {
    Random rng(Mix(size.seed, static_cast<std::uint64_t>(path)));
    SeriesState state = NewSeriesState(p);
    StepResult r;
    float* x = out.x.data() + static_cast<std::size_t>(path) * per_path;
    for (long t = 0; t < per_path; ++t) {
      const double y = InControlValue(p.method, m, t, rng);
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

std::string CacheKey(const PolicySpec& p, std::size_t rule, double every, double clear_fraction,
                     const SimulationSize& size) {
  const RuleSpec& r = p.rules[rule];
  std::ostringstream k;
  k.precision(17);
  k << static_cast<int>(p.method) << ' ' << p.constants.alpha << ' ' << p.constants.beta << ' '
    << p.constants.phi << ' ' << p.constants.gamma << ' ' << p.constants.season_length << ' '
    << p.adaptive.enabled << ' ' << p.adaptive.floor << ' ' << p.adaptive.cap << ' '
    << p.adaptive.lagged << ' ' << p.signal_beta << ' ' << p.warmup << ' '
    << static_cast<int>(r.signal) << ' ' << static_cast<int>(r.direction) << ' ' << r.persistence
    << ' ' << r.periods << ' ' << r.resolve_after << ' ' << every << ' ' << clear_fraction << ' '
    << size.paths << ' ' << size.burn_in << ' ' << size.periods << ' ' << size.seed;
  return k.str();
}

}  // namespace

Calibration CalibrateRule(const PolicySpec& policy, std::size_t rule, double every,
                          double clear_fraction, const SimulationSize& size_in) {
  static std::mutex mu;
  static std::map<std::string, Calibration> cache;
  Calibration c;
  if (rule >= policy.rules.size() || !(every >= 1.0) || !(clear_fraction > 0.0) ||
      clear_fraction > 1.0) {
    c.problem =
        "calibration needs a rule, a budget of at least one period and a clear fraction in (0, 1]";
    return c;
  }
  if (!StepSignal(policy.rules[rule].signal) ||
      policy.rules[rule].signal == SignalKind::kAlphaAtCap) {
    c.problem = std::string("a ") + SignalKindName(policy.rules[rule].signal) +
                " rule cannot take a false-alarm budget; give it a limit";
    return c;
  }
  // Series of `every` periods from their start; enough of them for about 200 expected false
  // alerts at the target rate (and never fewer than size.paths).
  SimulationSize size = size_in;
  size.true_start = false;
  size.burn_in = 0;
  size.periods =
      StartWindow(policy.method, policy.start) + policy.warmup + static_cast<int>(std::ceil(every));
  size.paths = std::max(size.paths, 200);
  const double needed = 200.0 * every;
  const double have = static_cast<double>(size.paths) * std::ceil(every);
  if (have < needed) size.paths = static_cast<int>(std::ceil(needed / std::ceil(every)));
  const std::string key = CacheKey(policy, rule, every, clear_fraction, size);
  {
    std::lock_guard lock(mu);
    auto it = cache.find(key);
    if (it != cache.end()) return it->second;
  }
  const SignalSample sample = SampleInControl(policy, rule, size);
  RuleSpec r = policy.rules[rule];
  const double target = 1.0 / every;
  auto rate_at = [&](double limit) {
    r.limit = limit;
    r.clear = clear_fraction * limit;
    return EpisodeRate(sample, r);
  };
  float top = 0.0f;
  for (float v : sample.x)
    if (!std::isnan(v)) top = std::max(top, v);
  double lo = 0.0, hi = static_cast<double>(top);
  if (!(hi > 0.0)) {
    c.problem = "the signal never left zero in the simulation";
    return c;
  }
  // The rate is not monotone near zero (a limit of 0 makes one endless episode), so halve
  // down from the largest value seen (a rare start-up outlier may make it huge) to the first
  // limit whose rate is over budget, then bisect the step above it.
  for (int k = 0;; ++k) {
    const double at = hi / 2;
    if (rate_at(at) > target) {
      lo = at;
      break;
    }
    hi = at;
    if (k == 60) {
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
  c.ok = true;
  c.limit = hi;
  c.rate = rate_at(hi);
  std::lock_guard lock(mu);
  cache.emplace(key, c);
  return c;
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
