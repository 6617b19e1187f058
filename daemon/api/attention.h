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
// Three steps, so the pass over every series runs off the engine thread: on the engine, the
// read view and the unresolved alerts summed by series (TallyAlerts); on the API's reader
// thread, the pass over the view (PickAttention); on the engine again, the page's rows from
// the series and the store (AttentionRows: alerts, the last 26 periods).
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

// What the unresolved alerts of one series add up to.
struct AlertSum {
  int open = 0, acknowledged = 0, snoozed = 0;
  int worst = -1;           // highest severity (monitors::Severity), -1: none
  std::uint64_t rules = 0;  // rules with an unresolved alert
  unsigned severities = 0;  // bit per severity
};
// By series index, ascending.
using AlertSums = std::vector<std::pair<std::size_t, AlertSum>>;

// Engine thread.
AlertSums TallyAlerts(Engine& engine);

struct AttentionPick {
  struct Entry {
    std::uint32_t index;
    int group;  // 0 open, 1 acknowledged, 2 near, 3 snoozed
    int worst;
    float closeness;
    int nearest;
    bool alerts;
  };
  std::vector<Entry> page;
  std::size_t total = 0;
  nlohmann::json counts;
};
// Any thread: the pass over the view.
Result<AttentionPick> PickAttention(const ReadView& view, const AlertSums& sums,
                                    const AttentionQuery& q);

// Engine thread: {"counts": [per policy], "total", "offset", "limit", "near", "rows": [...]}
// (README, "HTTP API").
Result<nlohmann::json> AttentionRows(Engine& engine, const ReadView& view,
                                     const AttentionPick& pick, const AttentionQuery& q);

}  // namespace forewarden
