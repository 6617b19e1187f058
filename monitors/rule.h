// Alert rules as a pure function: limit, persistence, hysteresis and direction.
//
// A rule watches one signal of one series:
//   trigg  Trigg's signal E/M                     (limit in [0, 1])
//   cusum  the cumulative signal C/M              (limit in MADs)
//   error  this period's error in sigmas, e / (1.2533*M before the update)  (a spike)
// Positive values mean actuals above forecast ("under-forecast"); negative ones mean the
// forecast was too high ("over-forecast").
// The rule holds once the signal has been beyond `limit` in the watched direction for
// `persistence` consecutive periods, and stops holding when it comes back within `clear`
// (clear <= limit gives hysteresis). A period where the signal is undefined changes nothing.
#pragma once

#include <algorithm>
#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <vector>

namespace monitors {

enum class SignalKind { kTrigg, kCusum, kError };
enum class Direction { kBoth, kUnder, kOver };
enum class Severity { kInfo, kWarning, kCritical };

struct RuleSpec {
  std::string name;
  SignalKind signal = SignalKind::kTrigg;
  double limit = 0.5;
  double clear = 0.5;
  int persistence = 1;
  Direction direction = Direction::kBoth;
  Severity severity = Severity::kWarning;
};

struct RuleState {
  std::uint16_t run = 0;  // consecutive periods beyond the limit (saturates at 65535)
  bool active = false;    // the rule holds
};

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

// Advances the rule by one period with the signal's value (nullopt if undefined).
RuleChange EvaluateRule(const RuleSpec& rule, RuleState& state, std::optional<double> value);

const char* SignalKindName(SignalKind k);
const char* DirectionName(Direction d);
const char* SeverityName(Severity s);
std::optional<SignalKind> ParseSignalKind(const std::string& t);
std::optional<Direction> ParseDirection(const std::string& t);
std::optional<Severity> ParseSeverity(const std::string& t);

}  // namespace monitors
