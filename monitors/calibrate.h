// Limits from a false-alarm budget.
//
// Published tracking-signal limits misstate their false-alarm rates (REFERENCES.md F4, C36): the
// rate depends on the signal, its smoothing constant, the forecasting method and its constants,
// and on the rule's persistence and hysteresis. A rule may therefore state how often a series
// that is in control may raise a false alert ("one per 104 periods"); CalibrateRule finds the
// limit that gives that rate by simulating the in-control process through the real Step and
// the real rule and episode code (rule.h), so what it counts is exactly what the service would
// raise.
//
// The in-control process (per path, independent N(0, 1) noise from a seeded generator):
//   ses, holt, damped    y = 100 + 10 z                   (constant level, no trend)
//   seasonal-add         y = 100 + 15 sin(2 pi j / m) + 10 z
//   seasonal-mul         y = (100 + 10 z) * (1 + 0.15 sin(2 pi j / m))
//   croston, sba         demand in a period with probability p, size max(1, mean + sd z): the
//                        policy's in_control (series.h; by default p = 1/3, mean 5, sd 2)
// Each simulated series starts with the policy's own start rule, constants, adaptive rule,
// monitoring constant and warm-up.
//
// The budget holds at every age, not only on average over a long life. A young series' signals
// carry the error of its start state (the cumulative signal never forgets it: C = (F - F1) /
// alpha on a constant level; a trend estimated from a short window wanders for dozens of
// periods), so one limit for every age either floods new series with false alerts or is too
// wide for old ones. The limit is therefore a function of the series' age past the warm-up,
// the time-varying limits of Lucas and Saccucci (1990) for EWMA charts, derived here by
// simulation because the signals' exact variance at an age depends on the start rule, the
// method, adaptive alpha and the rule's persistence and hysteresis, for which no closed form
// exists. Ages are cut into bands, [0, 4), [4, 8), [8, 16), ... [64, 128), then the steady band
// from 128 on (the first band widens for large budgets, so that it needs at most about 200,000
// paths); each band's limit is the smallest whose episodes opened in that band are at most
// 1 / every per series-period, given the limits of the bands before it (the rule's state is
// carried from band to band). Young bands are simulated on enough paths for 100 expected false
// alerts, the steady band (ages 128 to 128 + every) for 200. All bands share their paths
// (common random numbers): the first paths live longest.
//
// The rate counted is episodes opened per period (an episode is one alert: rule.h).
// Deterministic: the same inputs give the same limits on every machine.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "monitors/rule.h"
#include "monitors/series.h"

namespace monitors {

struct SimulationSize {
  int paths = 400;
  int burn_in = 200;   // periods run before counting
  int periods = 2500;  // periods counted per path
  std::uint64_t seed = 20261202;
  bool true_start = false;  // start from the true in-control state instead of the policy's rule
};

// One rule's signal excursions (rule.h, Excursion) on simulated paths: `burn_in + periods`
// values per path, NaN where the signal is undefined.
struct SignalSample {
  int paths = 0;
  int burn_in = 0;
  int periods = 0;
  std::vector<float> x;
  const float* path(int p) const {
    return x.data() + static_cast<std::size_t>(p) * (burn_in + periods);
  }
};

// The policy's in-control process (above), observed through rule `rule` of the policy
// (started by the policy's start rule unless size.true_start).
SignalSample SampleInControl(const PolicySpec& policy, std::size_t rule,
                             const SimulationSize& size);

// The textbook setting of REFERENCES.md Table A: iid N(0, 1) errors fed straight into E, M and
// C with monitoring constant beta, from E = C = 0 and M = E|e| = sqrt(2/pi). `signal` is trigg
// or cusum; the excursion is taken in `direction`.
SignalSample SampleIidErrors(double beta, SignalKind signal, Direction direction,
                             const SimulationSize& size);

// Episodes opened per counted period when `rule` (its limit, clear, persistence,
// resolve_after) watches the sampled excursions.
double EpisodeRate(const SignalSample& sample, const RuleSpec& rule);

// Periods to the first value beyond `limit` on each path, counting from the first period
// (burn-in included); paths that never cross are left out.
std::vector<int> RunLengths(const SignalSample& sample, double limit);

struct Calibration {
  bool ok = false;
  double limit = 0.0;               // from the steady age on
  double rate = 0.0;                // episodes per period at that limit, in the simulation
  std::vector<AgeLimit> young;      // the limits of the young bands (rule.h, Limits by age)
  std::vector<double> young_rates;  // episodes per period in each young band at its limit
  std::string problem;
};

// The limits by age of rule `rule` for at most one false alert per `every` periods at every age
// (above); each clear level follows as clear_fraction * limit. `size` sets the least number of
// paths of the steady band and the seed (its other fields are not used). Results are cached for
// the process's lifetime (same inputs, same answer), so reloads repeat no work. Thread-safe.
Calibration CalibrateRule(const PolicySpec& policy, std::size_t rule, double every,
                          double clear_fraction, const SimulationSize& size = {});

// A rule's false-alarm budget: one false alert per `every` periods, clear at clear_fraction of
// the limit.
struct RuleBudget {
  std::size_t rule = 0;
  double every = 0.0;
  double clear_fraction = 1.0;
};
// CalibrateRule for several rules of one policy at once: one simulation of the in-control
// process serves them all (the rules only watch it). The answers are in the budgets' order.
std::vector<Calibration> CalibrateRules(const PolicySpec& policy,
                                        const std::vector<RuleBudget>& budgets,
                                        const SimulationSize& size = {});

// Periods per week for the expected-false-alerts figure: 7 (day), 1 (week), 12/52.1775 (month).
double PeriodsPerWeek(PeriodKind kind);

}  // namespace monitors
