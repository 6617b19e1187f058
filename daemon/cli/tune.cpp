#include "daemon/cli/tune.h"

#include <algorithm>
#include <atomic>
#include <bit>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <cstdio>
#include <cstring>
#include <limits>
#include <mutex>
#include <optional>
#include <ostream>
#include <thread>

#include "config/edit.h"
#include "config/grid.h"
#include "config/load.h"
#include "daemon/cli/history.h"
#include "daemon/cli/tune_report.h"
#include "daemon/common/chunked_vector.h"
#include "daemon/common/csv.h"
#include "daemon/common/text_out.h"
#include "monitors/calibrate.h"

namespace forewarden {

namespace {

using Clock = std::chrono::steady_clock;
using monitors::PeriodOrdinal;
constexpr PeriodOrdinal kNoChange = std::numeric_limits<PeriodOrdinal>::max();
constexpr int kCatchWindow = 13;  // periods after a change within which an alert catches it

double Seconds(Clock::time_point since) {
  return std::chrono::duration<double>(Clock::now() - since).count();
}

// One policy's history in memory: its series' rows back to back, in period order.
struct PolicyData {
  const config::Policy* policy = nullptr;
  std::vector<std::string_view> keys;
  std::vector<std::size_t> begin;  // row offsets, one per series plus the end
  std::vector<PeriodOrdinal> ord;
  std::vector<double> val;
  std::vector<double> scale;                        // in-sample naive MAE per series (0: none)
  std::vector<std::vector<PeriodOrdinal>> changes;  // per series, sorted (truth file)
};

struct Figures {
  long scored = 0, scaled = 0, alerts = 0, watched = 0, false_alerts = 0, changes = 0, caught = 0;
  double sum_abs = 0, sum_sq = 0, sum_err = 0, sum_scaled = 0;
  std::vector<int> delays;

  static double Ratio(double a, double b) {
    return b > 0 ? a / b : std::numeric_limits<double>::quiet_NaN();
  }
  double mae() const { return Ratio(sum_abs, static_cast<double>(scored)); }
  double rmse() const { return std::sqrt(Ratio(sum_sq, static_cast<double>(scored))); }
  double mase() const { return Ratio(sum_scaled, static_cast<double>(scaled)); }
  double mean_error() const { return Ratio(sum_err, static_cast<double>(scored)); }
  double alerts_per_1000() const {
    return 1000.0 * Ratio(static_cast<double>(alerts), static_cast<double>(scored));
  }
  double false_per_1000() const {
    return 1000.0 * Ratio(static_cast<double>(false_alerts), static_cast<double>(watched));
  }
  double caught_share() const {
    return Ratio(static_cast<double>(caught), static_cast<double>(changes));
  }
  double median_delay() const {
    if (delays.empty()) return std::numeric_limits<double>::quiet_NaN();
    std::vector<int> d = delays;
    std::sort(d.begin(), d.end());
    const std::size_t n = d.size();
    return n % 2 ? d[n / 2] : 0.5 * (d[n / 2 - 1] + d[n / 2]);
  }
};

struct Candidate {
  std::size_t policy = 0;  // index into the policies' data
  double alpha = 0, beta = 0, phi = 1, gamma = 0, scale = 1;
  monitors::AdaptiveSpec adaptive;
  bool current = false;
  std::vector<config::KeyEdit> edits;
  std::optional<config::Policy> loaded;  // the policy as the loader reads the edited settings
  std::string problem;
  Figures fig;
  bool eligible = false, chosen = false;
};

std::string AdaptiveText(const monitors::AdaptiveSpec& a) {
  if (!a.enabled) return "off";
  return FormatNumber(a.floor) + ".." + FormatNumber(a.cap) + (a.lagged ? " lagged" : " immediate");
}

std::string AdaptiveYaml(const monitors::AdaptiveSpec& a) {
  return "{floor: " + FormatNumber(a.floor) + ", cap: " + FormatNumber(a.cap) +
         ", lag: " + (a.lagged ? "true" : "false") + "}";
}

// The candidate's constants in words, only the axes its method has.
std::string Describe(const Candidate& c, const config::Policy& p) {
  const monitors::Method m = p.spec.method;
  std::string s = "alpha " + FormatNumber(c.alpha);
  if (monitors::HasTrend(m)) s += ", trend_beta " + FormatNumber(c.beta);
  if (m == monitors::Method::kDamped || monitors::IsSeasonal(m))
    s += ", damping " + FormatNumber(c.phi);
  if (monitors::IsSeasonal(m)) s += ", season_gamma " + FormatNumber(c.gamma);
  if (!monitors::IsIntermittent(m)) s += ", adaptive " + AdaptiveText(c.adaptive);
  if (!p.calibrations.empty()) s += ", budgets x" + FormatNumber(c.scale);
  return s;
}

// What the candidate changes against the policy as it is, in words ("" = nothing).
std::string ChangeText(const Candidate& c) {
  std::string s;
  for (const config::KeyEdit& e : c.edits) {
    if (!e.rule.empty()) continue;
    if (!s.empty()) s += ", ";
    s += e.key + " " + (e.value ? *e.value : std::string("off"));
  }
  if (c.scale != 1.0) {
    if (!s.empty()) s += ", ";
    s += "false_alert_every x" + FormatNumber(c.scale);
  }
  return s;
}

std::vector<config::KeyEdit> EditsOf(const Candidate& c, const config::Policy& p) {
  const monitors::PolicySpec& s = p.spec;
  std::vector<config::KeyEdit> e;
  auto set = [&](const char* key, double v, double now) {
    if (v != now) e.push_back({p.name, "", key, FormatNumber(v)});
  };
  set("alpha", c.alpha, s.constants.alpha);
  set("trend_beta", c.beta, s.constants.beta);
  set("damping", c.phi, s.constants.phi);
  set("season_gamma", c.gamma, s.constants.gamma);
  if (!monitors::SameAdaptive(c.adaptive, s.adaptive)) {
    if (c.adaptive.enabled)
      e.push_back({p.name, "", "adaptive", AdaptiveYaml(c.adaptive)});
    else
      e.push_back({p.name, "", "adaptive", std::nullopt});
  }
  if (c.scale != 1.0)
    for (const config::RuleCalibration& rc : p.calibrations)
      e.push_back({p.name, rc.rule, "false_alert_every", FormatNumber(rc.every * c.scale)});
  return e;
}

// Runs every series of `d` through `spec` and adds up the figures.
void Evaluate(const PolicyData& d, const monitors::PolicySpec& spec, bool with_truth,
              const config::Policy& policy, Figures& f, std::string& problem,
              std::atomic<long>& progress) {
  monitors::StepResult r;
  std::vector<PeriodOrdinal> opened;
  std::string why;
  const std::size_t n = d.keys.size();
  for (std::size_t s = 0; s < n; ++s) {
    monitors::SeriesState st = monitors::NewSeriesState(spec);
    const PeriodOrdinal first_change =
        d.changes.empty() || d.changes[s].empty() ? kNoChange : d.changes[s].front();
    const double scale = d.scale[s];
    opened.clear();
    for (std::size_t k = d.begin[s]; k < d.begin[s + 1]; ++k) {
      if (monitors::Step(spec, st, d.ord[k], d.val[k], r, &why) != monitors::StepStatus::kOk) {
        problem = "series '" + std::string(d.keys[s]) + "', period " +
                  monitors::FormatPeriod(policy.period, d.ord[k]) + ": " + why;
        return;
      }
      if (r.has_forecast && st.forecasts > spec.warmup) {
        const double e = r.error, a = std::fabs(e);
        ++f.scored;
        f.sum_abs += a;
        f.sum_sq += e * e;
        f.sum_err += e;
        if (scale > 0) {
          f.sum_scaled += a / scale;
          ++f.scaled;
        }
        if (d.ord[k] < first_change) ++f.watched;
      }
      if (r.episodes_opened) {
        const int count = std::popcount(r.episodes_opened);
        f.alerts += count;
        if (with_truth)
          for (int i = 0; i < count; ++i) opened.push_back(d.ord[k]);
      }
    }
    progress.fetch_add(static_cast<long>(d.begin[s + 1] - d.begin[s]), std::memory_order_relaxed);
    if (!with_truth) continue;
    for (PeriodOrdinal t : opened)
      if (t < first_change) ++f.false_alerts;
    if (d.changes.empty()) continue;
    const auto& ch = d.changes[s];
    for (std::size_t i = 0; i < ch.size(); ++i) {
      PeriodOrdinal end = ch[i] + kCatchWindow;
      if (i + 1 < ch.size()) end = std::min(end, ch[i + 1] - 1);
      ++f.changes;
      for (PeriodOrdinal t : opened)  // in period order
        if (t >= ch[i] && t <= end) {
          ++f.caught;
          f.delays.push_back(static_cast<int>(t - ch[i]));
          break;
        }
    }
  }
}

// The in-sample mean absolute error of the naive forecast (lag m) over a series' rows.
double NaiveScale(const double* v, std::size_t n, std::size_t m) {
  if (n <= m) return 0.0;
  double sum = 0;
  for (std::size_t i = m; i < n; ++i) sum += std::fabs(v[i] - v[i - m]);
  return sum / static_cast<double>(n - m);
}

Status WriteWhole(const std::string& path, std::string_view text) {
  const std::string temp = path + ".partial";
  std::FILE* f = std::fopen(temp.c_str(), "wb");
  if (!f) return Status::Io(temp + ": cannot create: " + std::strerror(errno));
  const bool ok = std::fwrite(text.data(), 1, text.size(), f) == text.size();
  const bool closed = std::fclose(f) == 0;
  if (!ok || !closed || std::rename(temp.c_str(), path.c_str()) != 0) {
    Status s = Status::Io(path + ": cannot write: " + std::strerror(errno));
    std::remove(temp.c_str());
    return s;
  }
  return Status::Ok();
}

// The truth file: series,period,kind (other columns ignored); changes of series not in the
// history are left out. Problems name the file, line and field.
Status ReadTruth(const std::string& path, const HistoryReader& reader,
                 std::vector<std::vector<PeriodOrdinal>>& changes, long& ignored) {
  CsvReader in(path);
  if (!in.ok()) return Status::Io(path + ": " + in.error());
  std::vector<std::string_view> fields;
  if (!in.Next(fields)) {
    if (!in.ok()) return Status::Io(path + ": " + in.error());
    return Status::Invalid(path + ": empty: expected the header series,period,kind");
  }
  int cs = -1, cp = -1;
  for (std::size_t i = 0; i < fields.size(); ++i) {
    if (fields[i] == "series") cs = static_cast<int>(i);
    if (fields[i] == "period") cp = static_cast<int>(i);
  }
  if (cs < 0 || cp < 0)
    return Status::Invalid(path + ": line " + std::to_string(in.line()) +
                           ": the header needs the columns series and period");
  const std::size_t ncols = fields.size();
  changes.assign(reader.series_count(), {});
  while (in.Next(fields)) {
    const std::string where = path + ": line " + std::to_string(in.line()) + ", field ";
    if (fields.size() != ncols)
      return Status::Invalid(path + ": line " + std::to_string(in.line()) + ": expected " +
                             std::to_string(ncols) + " fields, found " +
                             std::to_string(fields.size()));
    if (fields[cs].empty()) return Status::Invalid(where + "series: the series key is empty");
    const HistorySeries* series = reader.Find(fields[cs]);
    if (!series) {
      ++ignored;
      continue;
    }
    const monitors::PeriodParse p = monitors::ParsePeriod(series->policy->period, fields[cp]);
    if (!p.ok()) return Status::Invalid(where + "period: " + p.error);
    changes[series->index].push_back(p.ordinal);
  }
  if (!in.ok()) return Status::Invalid(path + ": " + in.error());
  for (auto& c : changes) std::sort(c.begin(), c.end());
  return Status::Ok();
}

// Runs `work(i)` for i in [0, n) on `threads` threads, taking items in order; the caller's
// thread meanwhile calls `tick()` about four times a second until all are done.
template <typename Work, typename Tick>
void RunParallel(std::size_t n, int threads, Work&& work, Tick&& tick) {
  std::atomic<std::size_t> next{0};
  std::mutex mu;
  std::condition_variable cv;
  int running = threads;
  std::vector<std::thread> pool;
  pool.reserve(static_cast<std::size_t>(threads));
  for (int t = 0; t < threads; ++t)
    pool.emplace_back([&] {
      for (std::size_t i; (i = next.fetch_add(1)) < n;) work(i);
      std::lock_guard lock(mu);
      if (--running == 0) cv.notify_all();
    });
  {
    std::unique_lock lock(mu);
    while (!cv.wait_for(lock, std::chrono::milliseconds(250), [&] { return running == 0; })) {
      lock.unlock();
      tick();
      lock.lock();
    }
  }
  for (auto& t : pool) t.join();
}

std::string Fixed(double v, int digits) {
  if (std::isnan(v)) return "-";
  char b[64];
  std::snprintf(b, sizeof b, "%.*f", digits, v);
  return b;
}

// A share as a whole percentage, "-" when there is none (no changes to catch).
std::string Percent(double share) {
  return std::isnan(share) ? std::string("-") : Fixed(100 * share, 0) + "%";
}

}  // namespace

Result<TuneSummary> RunTune(const config::Settings& settings, const std::string& settings_text,
                            const TuneOptions& options, std::ostream& out, std::ostream& err) {
  TuneSummary summary;
  const bool with_truth = !options.truth.empty();
  const int threads = options.threads > 0
                          ? options.threads
                          : std::max(1, static_cast<int>(std::thread::hardware_concurrency()));

  // The grid first: a wrong grid is refused before the history is read.
  const config::GridLoad grid = config::LoadTuneGrid(options.grid, settings, with_truth);
  if (!grid.ok()) {
    std::string m;
    for (const auto& p : grid.problems) m += (m.empty() ? "" : "\n") + p.ToString();
    return Status::Invalid(m);
  }

  // The candidates: every combination of each policy's axes, the current settings first.
  std::vector<Candidate> cands;
  std::vector<std::size_t> first_of(settings.policies.size() + 1, 0);
  for (std::size_t pi = 0; pi < settings.policies.size(); ++pi) {
    const config::Policy& p = settings.policies[pi];
    const config::GridAxes& a = grid.grid.policies[pi].second;
    first_of[pi] = cands.size();
    for (double alpha : a.alpha)
      for (double beta : a.trend_beta)
        for (double phi : a.damping)
          for (double gamma : a.season_gamma)
            for (const auto& ad : a.adaptive)
              for (double scale : a.false_alert_scale) {
                Candidate c;
                c.policy = pi;
                c.alpha = alpha;
                c.beta = beta;
                c.phi = phi;
                c.gamma = gamma;
                c.adaptive = ad;
                c.scale = scale;
                c.edits = EditsOf(c, p);
                c.current = c.edits.empty();
                cands.push_back(std::move(c));
              }
  }
  first_of[settings.policies.size()] = cands.size();

  // Each candidate's policy as the loader reads it from the edited settings: the limits of
  // calibrated rules are derived for its constants exactly as check-config would. This needs
  // no history, so it runs beside the read; a policy found to have no series in the history
  // is skipped from then on.
  auto say = [&](const std::string& line) {
    if (options.progress) err << '\r' << line << "\033[K" << std::flush;
  };
  std::vector<std::atomic<bool>> absent(settings.policies.size());
  std::atomic<long> prepared{0};
  std::atomic<bool> reading{true};
  struct Background {
    std::thread thread;
    std::atomic<bool> stop{false};
    ~Background() {
      stop = true;
      if (thread.joinable()) thread.join();
    }
  } prep;
  const auto prep_start = Clock::now();
  prep.thread = std::thread([&] {
    RunParallel(
        cands.size(), threads,
        [&](std::size_t i) {
          Candidate& c = cands[i];
          if (prep.stop || absent[c.policy]) return;
          const config::Policy& p = settings.policies[c.policy];
          if (c.edits.empty()) {
            c.loaded = p;
          } else {
            std::string text, why;
            if (!config::EditSettingsText(settings_text, c.edits, text, why)) {
              c.problem = why;
            } else {
              config::LoadResult l = config::LoadSettingsText(text, options.config);
              if (!l.ok()) {
                c.problem = l.problems.front().ToString();
              } else {
                for (config::Policy& q : l.settings.policies)
                  if (q.name == p.name) c.loaded = std::move(q);
              }
            }
          }
          prepared.fetch_add(1);
        },
        [&] {
          say(std::string("tune: ") + (reading ? "reading the history; " : "") +
              "deriving limits: " + std::to_string(prepared.load()) + " of " +
              std::to_string(cands.size()) + " candidates");
        });
    summary.prepare_seconds = Seconds(prep_start);
  });

  // The history, read once through replay's reader (same checks, same words).
  auto t0 = Clock::now();
  const std::string input_name = options.input == "-" ? "<stdin>" : options.input;
  HistoryReader reader(settings, options.input);
  if (Status s = reader.Open(); !s) return s.Prefix(input_name + ": ");
  struct RowRef {
    std::uint32_t series;
    PeriodOrdinal ord;
    double val;
  };
  ChunkedVector<RowRef> rows;  // never moved while it grows
  {
    monitors::StepResult r;
    HistoryRow row;
    for (;;) {
      const Result<bool> more = reader.Next(row, r);
      if (!more) return Status(more.status()).Prefix(input_name + ": ");
      if (!*more) break;
      if (row.series->index > std::numeric_limits<std::uint32_t>::max())
        return Status::Invalid(input_name + ": more than 4,294,967,295 series");
      rows.push_back(
          {static_cast<std::uint32_t>(row.series->index), row.period->parse.ordinal, row.value});
    }
  }
  summary.series = static_cast<long>(reader.series_count());
  summary.actuals = static_cast<long>(rows.size());
  std::vector<std::vector<PeriodOrdinal>> changes;
  long truth_ignored = 0;
  if (with_truth) {
    if (Status s = ReadTruth(options.truth, reader, changes, truth_ignored); !s) return s;
  }

  // Group the rows by policy and series (a counting sort: series keep first-seen order).
  std::vector<PolicyData> data(settings.policies.size());
  for (std::size_t i = 0; i < settings.policies.size(); ++i) data[i].policy = &settings.policies[i];
  {
    const auto& all = reader.series();
    std::vector<std::size_t> count(all.size(), 0), local(all.size(), 0), owner(all.size(), 0);
    for (std::size_t i = 0; i < rows.size(); ++i) ++count[rows[i].series];
    for (const HistorySeries& s : all) {
      owner[s.index] = static_cast<std::size_t>(s.policy - settings.policies.data());
      PolicyData& d = data[owner[s.index]];
      local[s.index] = d.keys.size();
      d.keys.push_back(s.key);
      d.begin.push_back(d.ord.size());
      d.ord.resize(d.ord.size() + count[s.index]);
      if (with_truth) d.changes.push_back(std::move(changes[s.index]));
    }
    std::vector<std::size_t> fill(all.size(), 0);
    for (PolicyData& d : data) {
      d.begin.push_back(d.ord.size());
      d.val.resize(d.ord.size());
    }
    for (std::size_t i = 0; i < rows.size(); ++i) {
      const RowRef& r = rows[i];
      PolicyData& d = data[owner[r.series]];
      const std::size_t at = d.begin[local[r.series]] + fill[r.series]++;
      d.ord[at] = r.ord;
      d.val[at] = r.val;
    }
    rows = ChunkedVector<RowRef>();
    for (PolicyData& d : data) {
      const monitors::PolicySpec& spec = d.policy->spec;
      const std::size_t m = monitors::IsSeasonal(spec.method)
                                ? static_cast<std::size_t>(spec.constants.season_length)
                                : 1;
      d.scale.resize(d.keys.size());
      for (std::size_t s = 0; s < d.keys.size(); ++s)
        d.scale[s] = NaiveScale(d.val.data() + d.begin[s], d.begin[s + 1] - d.begin[s], m);
    }
  }
  summary.read_seconds = Seconds(t0);
  reading = false;
  for (std::size_t pi = 0; pi < data.size(); ++pi) absent[pi] = data[pi].keys.empty();
  prep.thread.join();
  long present = 0;
  for (const Candidate& c : cands)
    if (!absent[c.policy]) ++present;
  summary.candidates = present;

  // Every candidate over its policy's history, the largest first.
  std::vector<std::size_t> order(cands.size());
  for (std::size_t i = 0; i < order.size(); ++i) order[i] = i;
  std::stable_sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) {
    return data[cands[a].policy].ord.size() > data[cands[b].policy].ord.size();
  });
  double total = 0;
  for (const Candidate& c : cands)
    if (c.loaded && !absent[c.policy]) total += static_cast<double>(data[c.policy].ord.size());
  std::atomic<long> done{0};
  t0 = Clock::now();
  RunParallel(
      order.size(), threads,
      [&](std::size_t i) {
        Candidate& c = cands[order[i]];
        if (!c.loaded || absent[c.policy]) return;
        const PolicyData& d = data[c.policy];
        Evaluate(d, c.loaded->spec, with_truth, *d.policy, c.fig, c.problem, done);
        if (!c.problem.empty()) c.loaded.reset();
      },
      [&] {
        const double s = Seconds(t0), x = static_cast<double>(done.load());
        const double rate = s > 0 ? x / s : 0;
        say("tune: " + Fixed(total > 0 ? 100.0 * x / total : 100.0, 0) + "%, " +
            Fixed(rate / 1e6, 1) + " M candidate-actuals/s, " +
            (rate > 0 ? Fixed((total - x) / rate, 0) : std::string("?")) + " s left");
      });
  summary.evaluate_seconds = Seconds(t0);
  summary.candidate_actuals = total;
  if (options.progress) err << "\r\033[K" << std::flush;

  // The choice per policy.
  std::vector<config::KeyEdit> chosen_edits;
  std::vector<ReportPolicy> report;
  TextOut table(nullptr);
  char line[512];
  std::snprintf(line, sizeof line, "%-20s %10s  %-17s %-17s %-21s%s  %s\n", "policy", "candidates",
                "MASE now/chosen", "MAE now/chosen",
                with_truth ? "false/1000 now/chosen" : "alerts/1000 now/chosen",
                with_truth ? "  caught now/chosen" : "", "change");
  table.Put(line);
  for (std::size_t pi = 0; pi < data.size(); ++pi) {
    const config::Policy& p = *data[pi].policy;
    const std::size_t from = first_of[pi];
    const std::size_t to = first_of[pi + 1];
    if (absent[pi]) continue;  // no series of this policy in the history
    const config::GridAxes& axes = grid.grid.policies[pi].second;
    auto rate = [&](const Candidate& c) {
      return with_truth ? c.fig.false_per_1000() : c.fig.alerts_per_1000();
    };
    auto score = [&](const Candidate& c) {
      const double m = c.fig.mase();
      return std::isnan(m) ? c.fig.mae() : m;
    };
    Candidate* now = nullptr;
    for (std::size_t i = from; i < to; ++i)
      if (cands[i].current) now = &cands[i];
    if (!now || !now->loaded) {
      return Status::Invalid("policy '" + p.name + "': the current settings do not run: " +
                             (now ? now->problem : std::string("missing")));
    }
    double ceiling = axes.max_alerts_per_1000 ? *axes.max_alerts_per_1000 : rate(*now);
    if (std::isnan(ceiling)) ceiling = 0;
    Candidate* best = nullptr;
    for (std::size_t i = from; i < to; ++i) {
      Candidate& c = cands[i];
      if (!c.loaded) continue;
      const double r = rate(c);
      c.eligible = (std::isnan(r) ? 0.0 : r) <= ceiling + 1e-9;
      if (!c.eligible) continue;
      if (!best) {
        best = &c;
        continue;
      }
      const double a = score(c), b = score(*best);
      auto better = [&] {
        if (a != b) return a < b;
        const double ca = with_truth ? c.fig.caught_share() : 0,
                     cb = with_truth ? best->fig.caught_share() : 0;
        if (ca != cb) return ca > cb;
        if ((c.scale == 1.0) != (best->scale == 1.0)) return c.scale == 1.0;
        return rate(c) < rate(*best);
      };
      if (better()) best = &c;
    }
    if (!best) best = now;  // no candidate within a grid's ceiling: keep the settings
    best->chosen = true;
    const std::string change = best->current ? "" : ChangeText(*best);
    for (const auto& e : best->edits) chosen_edits.push_back(e);
    if (!best->current) ++summary.changed_policies;
    std::string rates = Fixed(rate(*now), 2) + " / " + Fixed(rate(*best), 2);
    std::string caught;
    if (with_truth)
      caught = "  " + Percent(now->fig.caught_share()) + " / " + Percent(best->fig.caught_share());
    std::snprintf(
        line, sizeof line, "%-20s %10zu  %-17s %-17s %-21s%s  %s\n", p.name.c_str(), to - from,
        (Fixed(now->fig.mase(), 3) + " / " + Fixed(best->fig.mase(), 3)).c_str(),
        (Fixed(now->fig.mae(), 2) + " / " + Fixed(best->fig.mae(), 2)).c_str(), rates.c_str(),
        with_truth
            ? (caught + std::string(18 - std::min<std::size_t>(18, caught.size()), ' ')).c_str()
            : "",
        change.empty() ? "none (keep)" : change.c_str());
    table.Put(line);
    ReportPolicy rp;
    rp.name = p.name;
    rp.method = std::string(monitors::MethodName(p.spec.method));
    rp.series = static_cast<long>(data[pi].keys.size());
    rp.actuals = static_cast<long>(data[pi].ord.size());
    rp.rate_name = with_truth ? "false alerts" : "alerts";
    rp.ceiling = ceiling;
    rp.change = change;
    for (std::size_t i = from; i < to; ++i) {
      const Candidate& c = cands[i];
      ReportPoint pt;
      pt.label = Describe(c, p);
      pt.rate = rate(c);
      pt.mase = c.fig.mase();
      pt.mae = c.fig.mae();
      pt.caught = with_truth ? c.fig.caught_share() : -1;
      pt.eligible = c.eligible;
      pt.chosen = c.chosen;
      pt.current = c.current;
      pt.problem = c.problem;
      rp.points.push_back(std::move(pt));
    }
    report.push_back(std::move(rp));
  }

  // The recommended settings: the input with the chosen candidates' keys edited, checked by
  // loading it back and comparing each changed policy with the candidate that was scored.
  std::string recommended = settings_text;
  if (!chosen_edits.empty()) {
    std::string why;
    if (!config::EditSettingsText(settings_text, chosen_edits, recommended, why))
      return Status(ErrorKind::kInternal, "cannot write the recommended settings: " + why);
    const config::LoadResult back = config::LoadSettingsText(recommended, options.settings_out);
    if (!back.ok())
      return Status(ErrorKind::kInternal,
                    "the recommended settings do not load: " + back.problems.front().ToString());
    for (const Candidate& c : cands) {
      if (!c.chosen || c.current) continue;
      const config::Policy& want = *c.loaded;
      bool same = false;
      for (const config::Policy& q : back.settings.policies) {
        if (q.name != want.name) continue;
        const auto &x = q.spec, &y = want.spec;
        same = x.constants.alpha == y.constants.alpha && x.constants.beta == y.constants.beta &&
               x.constants.phi == y.constants.phi && x.constants.gamma == y.constants.gamma &&
               monitors::SameAdaptive(x.adaptive, y.adaptive) && x.rules.size() == y.rules.size();
        for (std::size_t i = 0; same && i < x.rules.size(); ++i)
          same = x.rules[i].limit == y.rules[i].limit;
      }
      if (!same)
        return Status(ErrorKind::kInternal,
                      "the recommended settings of policy '" + want.name +
                          "' do not read back as the candidate that was scored");
    }
  }

  // Outputs.
  if (!options.results.empty()) {
    TextOut csv(nullptr);
    csv.Put(
        "policy,method,candidate,current,chosen,eligible,alpha,trend_beta,damping,season_gamma,"
        "adaptive,false_alert_scale,series,periods_scored,mae,rmse,mase,mean_error,"
        "alerts_per_1000,false_alerts_per_1000,changes,changes_caught,median_delay,problem\n");
    std::vector<long> number(data.size(), 0);
    for (const Candidate& c : cands) {
      if (absent[c.policy]) continue;
      const config::Policy& p = *data[c.policy].policy;
      const Figures& f = c.fig;
      auto num = [&](double v) {
        csv.Put(',');
        if (!std::isnan(v)) csv.Number(v);
      };
      csv.Field(p.name);
      csv.Put(',');
      csv.Put(monitors::MethodName(p.spec.method));
      csv.Put(',');
      csv.Integer(++number[c.policy]);
      csv.Put(c.current ? ",yes" : ",no");
      csv.Put(c.chosen ? ",yes" : ",no");
      csv.Put(c.eligible ? ",yes" : ",no");
      num(c.alpha);
      num(c.beta);
      num(c.phi);
      num(c.gamma);
      csv.Put(',');
      csv.Field(AdaptiveText(c.adaptive));
      num(c.scale);
      csv.Put(',');
      csv.Integer(static_cast<long long>(data[c.policy].keys.size()));
      csv.Put(',');
      csv.Integer(f.scored);
      const bool ran = c.problem.empty();
      num(ran ? f.mae() : NAN);
      num(ran ? f.rmse() : NAN);
      num(ran ? f.mase() : NAN);
      num(ran ? f.mean_error() : NAN);
      num(ran ? f.alerts_per_1000() : NAN);
      num(ran && with_truth ? f.false_per_1000() : NAN);
      csv.Put(',');
      if (with_truth) csv.Integer(f.changes);
      csv.Put(',');
      if (with_truth) csv.Integer(f.caught);
      num(ran && with_truth ? f.median_delay() : NAN);
      csv.Put(',');
      csv.Field(c.problem);
      csv.Put('\n');
    }
    if (Status s = WriteWhole(options.results, csv.View()); !s) return s;
  }
  if (!options.settings_out.empty()) {
    if (Status s = WriteWhole(options.settings_out, recommended); !s) return s;
  }
  if (!options.report.empty()) {
    std::string heading = std::to_string(summary.series) + " series, " +
                          std::to_string(summary.actuals) + " actuals from " + options.input;
    if (with_truth) heading += ", changes from " + options.truth;
    if (Status s = WriteWhole(options.report, TuneReportHtml(heading, report)); !s) return s;
  }
  out << table.View();
  if (truth_ignored > 0)
    out << "(" << truth_ignored << " changes in " << options.truth
        << " name series that are not in the history; left out)\n";
  return summary;
}

std::string FormatTuneSummary(const TuneSummary& s) {
  char b[512];
  const double rate = s.evaluate_seconds > 0 ? s.candidate_actuals / s.evaluate_seconds : 0;
  std::snprintf(b, sizeof b,
                "tune: %ld series, %ld actuals, %ld candidates; read %.3f s, limits derived in "
                "%.3f s, evaluated in %.3f s (%.1f M candidate-actuals/s); %ld %s changed\n",
                s.series, s.actuals, s.candidates, s.read_seconds, s.prepare_seconds,
                s.evaluate_seconds, rate / 1e6, s.changed_policies,
                s.changed_policies == 1 ? "policy" : "policies");
  return b;
}

}  // namespace forewarden
