// One series' monitor: the per-period step that every caller (replay, the service) uses.
//
// Step(policy, state, period, actual) takes in one actual of the period after the series'
// last one (or later: the gap rule fills the periods between), and returns what happened:
// the forecast that was fixed for this period before its actual, the error, the smoothing
// constant applied, E, M, C after the update, both signals, the prediction interval and the
// rules that hold. Order within a period (REFERENCES.md 8.1):
//   e = A - F;  [lagged alpha from E(t-1), M(t-1)];  update E, M, C;
//   [immediate alpha from E(t), M(t)];  update the model with that alpha;  signals;  rules.
// Periods without a forecast (the start window, croston before the first demand) change
// neither E, M, C nor the rules. During the first `warmup` periods that have a forecast
// E, M and C are updated but no signal is reported and no rule is evaluated.
// Pure: values in, values out; the caller owns the state and serialises access to it.
#pragma once

#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "monitors/method.h"
#include "monitors/period.h"
#include "monitors/rule.h"
#include "monitors/signals.h"
#include "monitors/start.h"

namespace monitors {

enum class GapRule { kZero, kSkip };

// Everything the step needs to know about a series' policy (no names, no matching).
struct PolicySpec {
  Method method = Method::kSes;
  Constants constants;
  AdaptiveSpec adaptive;
  StartSpec start;
  double signal_beta = 0.1;
  double initial_mad = 0.0;  // M before the first forecast (0: unknown)
  int warmup = 0;
  GapRule gaps = GapRule::kZero;
  long max_gap = 366;  // most missing periods one actual may bridge
  double coverage = 0.95;
  std::vector<RuleSpec> rules;  // at most kMaxRules
};

inline constexpr std::size_t kMaxRules = 64;

// Actuals of the start window, allocated only while a series is in it (8 bytes otherwise).
class WindowValues {
 public:
  WindowValues() = default;
  WindowValues(const WindowValues& o) { *this = o; }
  WindowValues& operator=(const WindowValues& o) {
    if (this != &o) v_ = o.v_ ? std::make_unique<std::vector<double>>(*o.v_) : nullptr;
    return *this;
  }
  WindowValues(WindowValues&&) noexcept = default;
  WindowValues& operator=(WindowValues&&) noexcept = default;

  void push_back(double y) {
    if (!v_) v_ = std::make_unique<std::vector<double>>();
    v_->push_back(y);
  }
  std::size_t size() const { return v_ ? v_->size() : 0; }
  const std::vector<double>& values() const {
    static const std::vector<double> kEmpty;
    return v_ ? *v_ : kEmpty;
  }
  void assign(std::vector<double> values) {
    if (values.empty())
      v_.reset();
    else
      v_ = std::make_unique<std::vector<double>>(std::move(values));
  }
  void clear() { v_.reset(); }

 private:
  std::unique_ptr<std::vector<double>> v_;
};

struct SeriesState {
  bool seen = false;
  bool started = false;         // past the start window
  std::int32_t forecasts = 0;   // periods that had a forecast
  PeriodOrdinal last_period = 0;
  long next_index = 0;          // index of the next period (0 = the first period)
  WindowValues window;          // start-window actuals (empty once started)
  Constants constants;          // in force; alpha changes under adaptive policies
  ModelState model;
  ErrorStats stats;
  std::int32_t missing = 0;     // periods skipped under gap rule "skip"
  RuleStates rules;
  std::uint64_t active = 0;     // bit i: rule i holds
};

// A fresh state for a series of this policy.
SeriesState NewSeriesState(const PolicySpec& policy);

struct StepResult {
  bool has_forecast = false;
  double forecast = 0.0;
  double error = 0.0;
  double alpha = 0.0;           // applied in this period's update
  ErrorStats stats;             // after the update
  std::optional<double> trigg;  // empty while M is 0 or during warm-up
  std::optional<double> cusum;
  std::optional<double> lower;  // prediction interval of `forecast`; empty while M is 0
  std::optional<double> upper;
  std::uint64_t active = 0;     // rules holding after this period
  std::uint64_t opened = 0;     // rules that started holding in this step (gap periods too)
  std::uint64_t cleared = 0;
  long filled = 0;              // gap periods filled with zero or skipped
};

enum class StepStatus {
  kOk,
  kNotLater,      // period is not after the series' last period
  kGapTooLong,    // more than max_gap missing periods
  kBadValue,      // NaN/Inf, or negative for croston/sba/seasonal-mul
  kNonFinite,     // the model state stopped being finite (seasonal-mul with level <= 0)
};

// Applies one actual. On any status but kOk the state is unchanged and `problem` (if given)
// says why.
StepStatus Step(const PolicySpec& policy, SeriesState& state, PeriodOrdinal period, double actual,
                StepResult& out, std::string* problem = nullptr);

}  // namespace monitors
