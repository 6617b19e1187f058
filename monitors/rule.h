// Alert rules as a pure function: limit, persistence, hysteresis, direction, escalation and
// the episode (one alert) that a rule's holding periods make up.
//
// A rule watches one signal of one series:
//   trigg         Trigg's signal E/M                               (limit in [0, 1])
//   cusum         the cumulative signal C/M                        (limit in MADs); with
//                 `periods` n: the sum of the newest n errors over the MAD from before them
//                 (a windowed cumulative signal that forgets the series' start)
//   error         this period's error in sigmas, e / (1.2533*M before the update)  (a spike)
//   bias          mean error over the last `periods` periods with a forecast, as a share of
//                 their mean actual: sum(e) / sum(A)               (limit a share, 0.2 = 20 %)
//   accuracy      mean absolute error over the same window: sum|e| / sum(A)
//   alpha_at_cap  the adaptive smoothing constant at its cap: the rule holds after
//                 `persistence` consecutive periods at the cap
//   stale         no actual for more than `limit` periods past due (evaluated on the service's
//                 clock, and in Step when an actual arrives after such a gap)
// Positive values mean actuals above forecast ("under-forecast"); negative ones mean the
// forecast was too high ("over-forecast"). bias and accuracy are undefined until the window is
// full or while its actuals sum to 0 or less.
// The rule holds once the signal has been beyond `limit` in the watched direction for
// `persistence` consecutive periods, and stops holding when it comes back within `clear`
// (clear <= limit gives hysteresis). A period where the signal is undefined changes nothing.
//
// Limits by age (`young`): a calibrated rule (calibrate.h) may widen its limit while a series is
// young, the time-varying limits of Lucas and Saccucci (1990): a young series' signals carry the
// error of its start state, so one limit for every age would raise most false alerts in the
// first periods. A series' age is the number of periods evaluated before this one (0 at the
// first period past the warm-up); at ages below young[0].until the rule takes young[0]'s limit
// and clear, below young[1].until young[1]'s, and so on; from the last `until` on, `limit` and
// `clear`. Empty for rules with a fixed limit.
//
// Episodes: an episode opens when the rule starts holding and no episode is open; it escalates
// (once) when the signal goes beyond `escalate_limit`; it ends after the rule has not held for
// `resolve_after` consecutive evaluated periods. A rule that holds again before then continues
// the same episode, so a signal hovering at its limit makes one alert, not many.
#pragma once

#include <algorithm>
#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <vector>

namespace monitors {

enum class SignalKind { kTrigg, kCusum, kError, kBias, kAccuracy, kAlphaAtCap, kStale };
enum class Direction { kBoth, kUnder, kOver };
enum class Severity { kInfo, kWarning, kCritical };

// A rule's limit and clear level for series younger than `until` (rule.h, Limits by age).
struct AgeLimit {
  int until = 0;
  double limit = 0.0;
  double clear = 0.0;
};

// The age given to rules evaluated outside a series' life (tests, stale checks): a steady age.
inline constexpr int kSteadyAge = 1 << 30;

struct RuleSpec {
  std::string name;
  SignalKind signal = SignalKind::kTrigg;
  double limit = 0.5;
  double clear = 0.5;
  int persistence = 1;
  Direction direction = Direction::kBoth;
  Severity severity = Severity::kWarning;
  int periods = 0;                       // bias, accuracy, windowed cusum: window length
  std::optional<double> escalate_limit;  // beyond it the episode takes escalate_severity
  Severity escalate_severity = Severity::kCritical;
  int resolve_after = 1;        // periods clear before the episode ends
  std::vector<AgeLimit> young;  // limits by age, ascending `until` (calibrated rules only)
};

struct Limits {
  double limit = 0.0;
  double clear = 0.0;
};

// The limit and clear level at `age` (periods evaluated before this one).
inline Limits LimitsAt(const RuleSpec& rule, int age) {
  if (rule.young.empty() || age >= rule.young.back().until) return {rule.limit, rule.clear};
  for (const AgeLimit& a : rule.young)
    if (age < a.until) return {a.limit, a.clear};
  return {rule.limit, rule.clear};
}

struct RuleState {
  std::uint16_t run = 0;       // consecutive periods beyond the limit (saturates at 65535)
  std::uint8_t quiet = 0;      // consecutive evaluated periods without holding, while open (<= 255)
  bool active : 1 = false;     // the rule holds
  bool open : 1 = false;       // an episode is open
  bool escalated : 1 = false;  // the open episode went beyond escalate_limit
};

// resolve_after is at most this (the quiet count is one byte).
inline constexpr int kMaxResolveAfter = 255;

// The rule states of one series: up to four inline (most policies have a few rules), more on
// the heap. Four bytes a rule, so a series with few rules costs no allocation.
class RuleStates {
 public:
  RuleStates() = default;
  RuleStates(const RuleStates& o) { *this = o; }
  RuleStates& operator=(const RuleStates& o) {
    if (this != &o) {
      resize(o.size_);
      std::copy(o.begin(), o.end(), begin());
    }
    return *this;
  }
  RuleStates(RuleStates&&) noexcept = default;
  RuleStates& operator=(RuleStates&&) noexcept = default;

  std::size_t size() const { return size_; }
  bool empty() const { return size_ == 0; }
  RuleState* begin() { return heap_ ? heap_.get() : inline_; }
  RuleState* end() { return begin() + size_; }
  const RuleState* begin() const { return heap_ ? heap_.get() : inline_; }
  const RuleState* end() const { return begin() + size_; }
  RuleState& operator[](std::size_t i) { return begin()[i]; }
  const RuleState& operator[](std::size_t i) const { return begin()[i]; }

  // Keeps the first min(n, size()) states; new ones start clear.
  void resize(std::size_t n) {
    if (n == size_) return;
    RuleState* old = begin();
    if (n > kInline) {
      std::unique_ptr<RuleState[]> bigger(new RuleState[n]);
      std::copy(old, old + std::min<std::size_t>(n, size_), bigger.get());
      heap_ = std::move(bigger);
    } else {
      if (heap_) std::copy(old, old + std::min<std::size_t>(n, size_), inline_);
      heap_.reset();
      for (std::size_t i = size_; i < n; ++i) inline_[i] = RuleState{};
    }
    size_ = static_cast<std::uint8_t>(n);
  }
  void assign(std::size_t n, RuleState value) {
    resize(n);
    std::fill(begin(), end(), value);
  }

 private:
  static constexpr std::size_t kInline = 4;
  std::unique_ptr<RuleState[]> heap_;
  RuleState inline_[kInline];
  std::uint8_t size_ = 0;
};

enum class RuleChange { kNone, kOpened, kCleared };

// The signal's excursion in the watched direction (positive = towards the limit).
inline double Excursion(Direction d, double v) {
  switch (d) {
    case Direction::kBoth:
      return v < 0 ? -v : v;
    case Direction::kUnder:
      return v;
    case Direction::kOver:
      return -v;
  }
  return 0;
}

// What an evaluation did to the rule's episode.
struct EpisodeChange {
  bool opened = false;
  bool escalated = false;
  bool resolved = false;
};

// Advances the rule by one period with the signal's value (nullopt if undefined), at the series'
// `age` (the limits by age above).
inline RuleChange EvaluateRule(const RuleSpec& rule, RuleState& st, std::optional<double> value,
                               int age = kSteadyAge) {
  if (!value) return RuleChange::kNone;
  const double x = Excursion(rule.direction, *value);
  const Limits at = LimitsAt(rule, age);
  if (x > at.limit) {
    if (st.run < UINT16_MAX) st.run += 1;
  } else {
    st.run = 0;
  }
  if (!st.active) {
    if (st.run >= rule.persistence) {
      st.active = true;
      return RuleChange::kOpened;
    }
    return RuleChange::kNone;
  }
  if (x <= at.clear) {
    st.active = false;
    return RuleChange::kCleared;
  }
  return RuleChange::kNone;
}

// Advances the episode after EvaluateRule with the same value (nothing when undefined).
inline EpisodeChange AdvanceEpisode(const RuleSpec& rule, RuleState& st,
                                    std::optional<double> value) {
  EpisodeChange c;
  if (!value) return c;
  if (st.active) {
    st.quiet = 0;
    if (!st.open) {
      st.open = true;
      st.escalated = false;
      c.opened = true;
    }
    if (rule.escalate_limit && !st.escalated &&
        Excursion(rule.direction, *value) > *rule.escalate_limit) {
      st.escalated = true;
      c.escalated = !c.opened;  // an episode that opens beyond it opens escalated
    }
    return c;
  }
  if (!st.open) return c;
  if (st.quiet < UINT8_MAX) st.quiet += 1;
  if (st.quiet >= rule.resolve_after) {
    st.open = false;
    st.escalated = false;
    st.quiet = 0;
    c.resolved = true;
  }
  return c;
}

// The severity of an open episode.
inline Severity EpisodeSeverity(const RuleSpec& rule, const RuleState& state) {
  return state.escalated ? rule.escalate_severity : rule.severity;
}

// Rules whose signal comes from the step's forecast error (everything but stale).
inline bool StepSignal(SignalKind k) {
  return k != SignalKind::kStale;
}

const char* SignalKindName(SignalKind k);
const char* DirectionName(Direction d);
const char* SeverityName(Severity s);
std::optional<SignalKind> ParseSignalKind(const std::string& t);
std::optional<Direction> ParseDirection(const std::string& t);
std::optional<Severity> ParseSeverity(const std::string& t);

}  // namespace monitors
