// The planner's attention list (GET /v1/attention): the series that need a look now, worked
// through from the top, with counts per policy.
//
// Order: series with an open alert first, then those whose alerts are all acknowledged, then
// series near a limit without an unresolved alert, then those whose alerts are all snoozed;
// inside each, the most severe alert first, then the series closest to (or furthest beyond) a
// limit, then the key. "Closeness" is a series' largest signal over its rule's limit: Trigg's
// signal and the plain cumulative signal against their rules' limits, and 1 for any rule that
// holds or was beyond its limit in the last period without yet holding (persistence). A series
// is "near" when its closeness is at least `near` (0.8 unless asked) and no rule holds.
//
// The default view ("attention") lists open and acknowledged alerts and near series; `state`
// narrows to one group (open, acknowledged, snoozed, near) or lists every series with an
// unresolved alert (unresolved) or the stale ones (stale). Filters: policy, label NAME:VALUE,
// rule (an unresolved alert of the rule, or the rule nearest its limit), severity (an unresolved
// alert of it), q (part of the key, any case). Counts cover every series of a policy, unfiltered.
// Engine thread only: one pass over the series and one over the unresolved alerts, then the
// page's rows from the store (alerts, the last 26 periods).
#pragma once

#include <optional>
#include <string>
#include <string_view>
#include <unordered_map>

#include <nlohmann/json.hpp>

#include "daemon/common/status.h"
#include "daemon/engine/engine.h"

namespace forewarden {

// label=NAME:VALUE against a series' label set; label sets are interned, so each is parsed once.
class LabelFilter {
 public:
  static Result<LabelFilter> Parse(const std::string& text);  // "" filters nothing
  bool Matches(std::string_view labels_json);

 private:
  std::string name_, value_;
  std::unordered_map<const char*, bool> seen_;
};

struct AttentionQuery {
  std::string state = "attention";
  std::string policy, label, rule, severity, q;
  double near = 0.8;
  long limit = 50, offset = 0;
  int recent = 26;  // periods of actuals and forecasts per row
};

// Checks the query's values; the message names the parameter.
Status CheckAttentionQuery(const AttentionQuery& q);

// {"counts": [per policy], "total", "offset", "limit", "near", "rows": [...]} (README, "HTTP API").
Result<nlohmann::json> AttentionPage(Engine& engine, const AttentionQuery& q);

}  // namespace forewarden
