// One series' monitor: the per-period step that every caller (replay, the service) uses.
//
// Step(policy, state, period, actual) takes in one actual of the period after the series'
// last one (or later: the gap rule fills the periods between), and returns what happened:
// the forecast that was fixed for this period before its actual, the error, the smoothing
// constant applied, E, M, C after the update, both signals, the prediction interval and the
// rules that hold. Order within a period:
//   e = A - F;  [lagged alpha from E(t-1), M(t-1)];  update E, M, C;
//   [immediate alpha from E(t), M(t)];  update the model with that alpha;  signals;  rules.
// Periods without a forecast (the start window, croston before the first demand) change
// neither E, M, C nor the rules. During the first `warmup` periods that have a forecast
// E, M and C are updated but no signal is reported and no rule is evaluated.
// Pure: values in, values out; the caller owns the state and serialises access to it.
#pragma once

#include <cstdint>
#include <cstring>
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
  // Negative actuals (net sales with returns): refused unless the policy accepts them, and only
  // the methods that can take them (ses, holt, damped, seasonal-add) may.
  bool accept_negative = false;
  std::vector<RuleSpec> rules;  // at most kMaxRules
  // croston and sba: the in-control demand their budgets are calibrated on (calibrate.h): a
  // demand in a period with this probability, of size max(1, size_mean + size_sd z).
  struct InControlDemand {
    double probability = 1.0 / 3.0;
    double size_mean = 5.0;
    double size_sd = 2.0;
  } in_control;
};

inline constexpr std::size_t kMaxRules = 64;
// The largest magnitude of an actual: beyond it a series' statistics could leave the finite
// doubles (MAD, cumulative error and the multiplicative seasons are sums and ratios of actuals).
inline constexpr double kMaxActual = 1e15;
// Whether a method can take negative actuals at all.
bool MethodTakesNegative(Method m);
// Why an actual cannot enter a series of this policy (not finite, beyond kMaxActual, negative
// where refused), or null when it can.
const char* ActualProblem(const PolicySpec& policy, double actual);

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

// Errors, actuals and the MAD before each of the newest periods with a forecast, for the
// bias, accuracy and windowed cusum rules (allocated only for policies that have such rules:
// 12 bytes a period).
class RecentWindow {
 public:
  static constexpr std::size_t kFields = 3;  // error, actual, MAD before the period
  RecentWindow() = default;
  RecentWindow(const RecentWindow& o) { *this = o; }
  RecentWindow& operator=(const RecentWindow& o) {
    if (this != &o) {
      buf_.reset();
      if (o.buf_) {
        const std::size_t n = Size(o.capacity());
        buf_.reset(new float[n]);
        std::copy(o.buf_.get(), o.buf_.get() + n, buf_.get());
      }
    }
    return *this;
  }
  RecentWindow(RecentWindow&&) noexcept = default;
  RecentWindow& operator=(RecentWindow&&) noexcept = default;

  // Adds the newest period; a new capacity starts the window again.
  void Push(std::uint16_t capacity, double error, double actual, double mad_before) {
    if (capacity == 0) {
      Clear();
      return;
    }
    Header h = header();
    if (capacity != h.cap || !buf_) {
      buf_.reset(new float[Size(capacity)]);
      h = Header{capacity, 0, 0, 0};
    }
    float* at = data() + kFields * h.head;
    at[0] = static_cast<float>(error);
    at[1] = static_cast<float>(actual);
    at[2] = static_cast<float>(mad_before);
    h.head = static_cast<std::uint16_t>((h.head + 1) % h.cap);
    if (h.count < h.cap) ++h.count;
    set_header(h);
  }
  struct Sums {
    double error = 0, abs_error = 0, actual = 0;
    double mad_before = 0;  // the MAD before the oldest of the n periods
  };
  // Sums over the newest n periods; false while fewer than n are held.
  bool Sum(int n, Sums& out) const {
    const Header h = header();
    if (n <= 0 || n > h.count) return false;
    out = Sums{};
    std::size_t i = h.head;
    for (int k = 0; k < n; ++k) {
      i = (i + h.cap - 1) % h.cap;
      const float* at = data() + kFields * i;
      out.error += at[0];
      out.abs_error += at[0] < 0 ? -at[0] : at[0];
      out.actual += at[1];
      out.mad_before = at[2];
    }
    return true;
  }
  void Clear() { buf_.reset(); }
  std::uint16_t capacity() const { return header().cap; }
  // Oldest first, kFields values a period, for serialisation.
  std::vector<float> Values() const {
    const Header h = header();
    std::vector<float> v;
    v.reserve(kFields * h.count);
    std::size_t i = (h.head + h.cap - h.count) % (h.cap ? h.cap : 1);
    for (int k = 0; k < h.count; ++k, i = (i + 1) % h.cap)
      v.insert(v.end(), data() + kFields * i, data() + kFields * (i + 1));
    return v;
  }

 private:
  // One allocation: a 8-byte header (capacity, next slot, count) then the periods, so that a
  // series pays one pointer when it has no window.
  // Trivial: copied in and out of the float buffer with memcpy. Eight bytes, the two floats the
  // buffer keeps for it, so that it is written and read back as one 8-byte word (a 6-byte
  // header was stored in two pieces and loaded in one, which the processor cannot forward from
  // the stores: a stall on every step of a policy with a window).
  struct Header {
    std::uint16_t cap, head, count, unused;
  };
  static_assert(sizeof(Header) == 2 * sizeof(float));
  static std::size_t Size(std::size_t cap) { return 2 + kFields * cap; }
  Header header() const {
    Header h{0, 0, 0, 0};
    if (buf_) std::memcpy(&h, buf_.get(), sizeof h);
    return h;
  }
  void set_header(const Header& h) { std::memcpy(buf_.get(), &h, sizeof h); }
  float* data() { return buf_.get() + 2; }
  const float* data() const { return buf_.get() + 2; }
  std::unique_ptr<float[]> buf_;
};

// Smoothing constants a series owns (fitted start rule only); 8 bytes when it has none.
class OwnConstants {
 public:
  OwnConstants() = default;
  OwnConstants(const OwnConstants& o) { *this = o; }
  OwnConstants& operator=(const OwnConstants& o) {
    if (this != &o) c_ = o.c_ ? std::make_unique<Constants>(*o.c_) : nullptr;
    return *this;
  }
  OwnConstants(OwnConstants&&) noexcept = default;
  OwnConstants& operator=(OwnConstants&&) noexcept = default;
  const Constants* get() const { return c_.get(); }
  void set(const Constants& c) { c_ = std::make_unique<Constants>(c); }
  void reset() { c_.reset(); }

 private:
  std::unique_ptr<Constants> c_;
};

// The window a policy's bias, accuracy and windowed cusum rules need (0: none).
std::uint16_t RecentCapacity(const PolicySpec& policy);

struct SeriesState {
  bool seen = false;
  bool started = false;        // past the start window
  std::int32_t forecasts = 0;  // periods that had a forecast
  PeriodOrdinal last_period = 0;
  long next_index = 0;  // index of the next period (0 = the first period)
  WindowValues window;  // start-window actuals (empty once started)
  double alpha = 0.0;   // in force; changes under adaptive policies
  OwnConstants own;     // fitted constants; else the policy's apply (with `alpha`)
  ModelState model;
  ErrorStats stats;
  std::int32_t missing = 0;  // periods skipped under gap rule "skip"
  RuleStates rules;
  std::uint64_t active = 0;  // bit i: rule i holds
  RecentWindow recent;       // bias/accuracy rules only
};

// The constants in force for a series: its own (fitted) or the policy's, with its alpha.
inline Constants EffectiveConstants(const PolicySpec& policy, const SeriesState& s) {
  Constants c = s.own.get() ? *s.own.get() : policy.constants;
  c.alpha = s.alpha;
  return c;
}

// Periods past the warm-up a series has been evaluated in (0 while warming): the age its rules'
// limits by age (rule.h) are read at.
inline int SeriesAge(const PolicySpec& policy, const SeriesState& s) {
  return s.forecasts > policy.warmup ? s.forecasts - policy.warmup : 0;
}

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
  std::optional<double> spike;  // the error in sigmas (MAD before the update)
  bool at_cap = false;          // adaptive alpha at its cap after this period
  std::uint64_t opened = 0;     // rules that started holding in this step (gap periods too)
  std::uint64_t cleared = 0;
  // Episodes (rule.h) in this step, gap periods included: bit i for rule i.
  std::uint64_t episodes_opened = 0;
  std::uint64_t episodes_escalated = 0;
  std::uint64_t episodes_resolved = 0;
  long filled = 0;  // gap periods filled with zero or skipped
};

// What one step did to rule `rule`'s episodes. Both the service (the alert book's changes) and
// replay (`--alerts` rows) read a step's episodes through this one function, in rule order:
// `opened` and `resolved` together mean an episode that began and ended inside the step (a
// stale gap), recorded opened, then resolved; `escalated` applies to the episode open after
// the step.
struct EpisodeStep {
  std::size_t rule = 0;
  bool opened = false, escalated = false, resolved = false;
};
// Calls `each` for every rule (of `rules`) whose episodes changed in step `r`, in rule order.
template <typename F>
void ForEachEpisodeStep(const StepResult& r, std::size_t rules, F&& each) {
  const std::uint64_t any = r.episodes_opened | r.episodes_escalated | r.episodes_resolved;
  if (!any) return;
  for (std::size_t i = 0; i < rules && i < 64; ++i) {
    const std::uint64_t bit = std::uint64_t{1} << i;
    if (!(any & bit)) continue;
    each(EpisodeStep{i, (r.episodes_opened & bit) != 0, (r.episodes_escalated & bit) != 0,
                     (r.episodes_resolved & bit) != 0});
  }
}

// The value rule `rule` watches after a step (`state` is the series' state after it), or
// nullopt when it is undefined. Not for stale rules.
std::optional<double> RuleValue(const RuleSpec& rule, const StepResult& result,
                                const SeriesState& state);

// The service's clock says the series has gone `overdue` periods past due without an actual:
// evaluates its stale rules, recording episode changes in `out` (its other fields untouched).
void CheckStale(const PolicySpec& policy, SeriesState& state, long overdue, StepResult& out);

enum class StepStatus {
  kOk,
  kNotLater,    // period is not after the series' last period
  kGapTooLong,  // more than max_gap missing periods
  kBadValue,    // NaN/Inf, beyond kMaxActual, or negative where the policy refuses it
  kNonFinite,   // the model state stopped being finite (seasonal-mul with level <= 0)
};

// Applies one actual. On any status but kOk the state is unchanged and `problem` (if given)
// says why.
StepStatus Step(const PolicySpec& policy, SeriesState& state, PeriodOrdinal period, double actual,
                StepResult& out, std::string* problem = nullptr);

}  // namespace monitors
