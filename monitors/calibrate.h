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
//   croston, sba         demand in a period with probability 1/3, size max(1, 5 + 2 z)
// Each simulated series starts with the policy's own start rule, constants, adaptive rule,
// monitoring constant and warm-up, and lives `every` periods: the budget is "at most one false
// alert per series in `every` periods", its start included. This matters: the cumulative
// signal never forgets the error of a series' start (C = (F - F1) / alpha on a constant level),
// so a limit derived from a perfectly started model is far too tight for real series.
//
// The rate counted is episodes opened per period (an episode is one alert: rule.h); the limit
// is the smallest one whose rate is at most 1 / every. Deterministic: the same inputs give the
// same limit on every machine.
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
  double limit = 0.0;
  double rate = 0.0;  // episodes per period at that limit, in the simulation
  std::string problem;
};

// The limit of rule `rule` for at most one false alert per `every` periods; the clear level
// follows as clear_fraction * limit. `size` sets the number of paths (at least 200 expected
// false alerts are simulated) and the seed; each path lives `every` periods plus the start
// window and warm-up, counted from its first period. Results are cached for the process's lifetime
// (same inputs, same answer), so reloads repeat no work. Thread-safe.
Calibration CalibrateRule(const PolicySpec& policy, std::size_t rule, double every,
                          double clear_fraction, const SimulationSize& size = {});

// Periods per week for the expected-false-alerts figure: 7 (day), 1 (week), 12/52.1775 (month).
double PeriodsPerWeek(PeriodKind kind);

}  // namespace monitors
