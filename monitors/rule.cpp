#include "monitors/rule.h"

namespace monitors {
namespace {

// The signal's excursion in the watched direction (positive = towards the limit).
double Excursion(Direction d, double v) {
  switch (d) {
    case Direction::kBoth: return v < 0 ? -v : v;
    case Direction::kUnder: return v;
    case Direction::kOver: return -v;
  }
  return 0;
}

}  // namespace

RuleChange EvaluateRule(const RuleSpec& rule, RuleState& st, std::optional<double> value) {
  if (!value) return RuleChange::kNone;
  const double x = Excursion(rule.direction, *value);
  if (x > rule.limit) {
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
  if (x <= rule.clear) {
    st.active = false;
    return RuleChange::kCleared;
  }
  return RuleChange::kNone;
}

const char* SignalKindName(SignalKind k) {
  switch (k) {
    case SignalKind::kTrigg: return "trigg";
    case SignalKind::kCusum: return "cusum";
    case SignalKind::kError: return "error";
  }
  return "?";
}
const char* DirectionName(Direction d) {
  switch (d) {
    case Direction::kBoth: return "both";
    case Direction::kUnder: return "under-forecast";
    case Direction::kOver: return "over-forecast";
  }
  return "?";
}
const char* SeverityName(Severity s) {
  switch (s) {
    case Severity::kInfo: return "info";
    case Severity::kWarning: return "warning";
    case Severity::kCritical: return "critical";
  }
  return "?";
}
std::optional<SignalKind> ParseSignalKind(const std::string& t) {
  if (t == "trigg") return SignalKind::kTrigg;
  if (t == "cusum") return SignalKind::kCusum;
  if (t == "error") return SignalKind::kError;
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
