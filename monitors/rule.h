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
  int run = 0;          // consecutive periods beyond the limit
  bool active = false;  // the rule holds
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
