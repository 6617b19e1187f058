#include "monitors/rule.h"

namespace monitors {
const char* SignalKindName(SignalKind k) {
  switch (k) {
    case SignalKind::kTrigg:
      return "trigg";
    case SignalKind::kCusum:
      return "cusum";
    case SignalKind::kError:
      return "error";
    case SignalKind::kBias:
      return "bias";
    case SignalKind::kAccuracy:
      return "accuracy";
    case SignalKind::kAlphaAtCap:
      return "alpha_at_cap";
    case SignalKind::kStale:
      return "stale";
  }
  return "?";
}
const char* DirectionName(Direction d) {
  switch (d) {
    case Direction::kBoth:
      return "both";
    case Direction::kUnder:
      return "under-forecast";
    case Direction::kOver:
      return "over-forecast";
  }
  return "?";
}
const char* SeverityName(Severity s) {
  switch (s) {
    case Severity::kInfo:
      return "info";
    case Severity::kWarning:
      return "warning";
    case Severity::kCritical:
      return "critical";
  }
  return "?";
}
std::optional<SignalKind> ParseSignalKind(const std::string& t) {
  if (t == "trigg") return SignalKind::kTrigg;
  if (t == "cusum") return SignalKind::kCusum;
  if (t == "error") return SignalKind::kError;
  if (t == "bias") return SignalKind::kBias;
  if (t == "accuracy") return SignalKind::kAccuracy;
  if (t == "alpha_at_cap") return SignalKind::kAlphaAtCap;
  if (t == "stale") return SignalKind::kStale;
  return std::nullopt;
}
std::optional<Direction> ParseDirection(const std::string& t) {
  if (t == "both") return Direction::kBoth;
  if (t == "under-forecast") return Direction::kUnder;
  if (t == "over-forecast") return Direction::kOver;
  return std::nullopt;
}
std::optional<Severity> ParseSeverity(const std::string& t) {
  if (t == "info") return Severity::kInfo;
  if (t == "warning") return Severity::kWarning;
  if (t == "critical") return Severity::kCritical;
  return std::nullopt;
}

}  // namespace monitors
