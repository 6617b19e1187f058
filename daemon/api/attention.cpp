#include "daemon/api/attention.h"

#include <algorithm>
#include <cctype>
#include <cmath>
#include <vector>

#include "daemon/store/alert_reads.h"
#include "monitors/interval.h"

namespace forewarden {

using nlohmann::json;

Result<LabelFilter> LabelFilter::Parse(const std::string& text) {
  LabelFilter f;
  if (text.empty()) return f;
  const std::size_t colon = text.find(':');
  if (colon == std::string::npos || colon == 0) return Status::Invalid("label must be name:value");
  f.name_ = text.substr(0, colon);
  f.value_ = text.substr(colon + 1);
  return f;
}

bool LabelFilter::Matches(std::string_view labels_json) {
  if (name_.empty()) return true;
  auto cached = seen_.find(labels_json.data());
  if (cached == seen_.end()) {
    json labels = json::parse(labels_json, nullptr, false);
    auto it = labels.is_object() ? labels.find(name_) : labels.end();
    const bool ok = labels.is_object() && it != labels.end() && *it == value_;
    cached = seen_.emplace(labels_json.data(), ok).first;
  }
  return cached->second;
}

Status CheckAttentionQuery(const AttentionQuery& q) {
  static const char* kStates[] = {"attention", "open",       "acknowledged", "snoozed",
                                  "near",      "unresolved", "stale"};
  if (std::find_if(std::begin(kStates), std::end(kStates),
                   [&](const char* s) { return q.state == s; }) == std::end(kStates))
    return Status::Invalid(
        "state must be attention, open, acknowledged, snoozed, near, unresolved or stale");
  if (!q.severity.empty() && !monitors::ParseSeverity(q.severity))
    return Status::Invalid("severity must be info, warning or critical");
  if (!(q.near > 0 && q.near <= 1)) return Status::Invalid("near must be a number in (0, 1]");
  if (q.q.size() > 256) return Status::Invalid("q: longer than 256 bytes");
  return LabelFilter::Parse(q.label).status();
}

namespace {

enum Group { kOpen = 0, kAcknowledged = 1, kNear = 2, kSnoozed = 3, kOther = 4 };
const char* GroupName(int g) {
  static const char* kNames[] = {"open", "acknowledged", "near", "snoozed", "other"};
  return kNames[g];
}

bool ContainsNoCase(std::string_view hay, const std::string& needle) {
  if (needle.empty()) return true;
  auto it = std::search(hay.begin(), hay.end(), needle.begin(), needle.end(), [](char a, char b) {
    return std::tolower(static_cast<unsigned char>(a)) ==
           std::tolower(static_cast<unsigned char>(b));
  });
  return it != hay.end();
}

json Number(std::optional<double> v) {
  if (!v || !std::isfinite(*v)) return nullptr;
  return *v;
}

struct PolicyCount {
  long series = 0, open = 0, acknowledged = 0, snoozed = 0, alerting = 0, stale = 0, warming = 0,
       in_control = 0, near = 0;
};

}  // namespace

AlertSums TallyAlerts(Engine& engine) {
  std::unordered_map<std::size_t, AlertSum> by_series;
  engine.alerts().Tally(
      [&](std::size_t index, std::size_t rule, const char* state, monitors::Severity severity) {
        AlertSum& a = by_series[index];
        const char st = state[0];
        if (st == 'o') ++a.open;
        if (st == 'a') ++a.acknowledged;
        if (st == 's') ++a.snoozed;
        a.worst = std::max(a.worst, static_cast<int>(severity));
        if (rule < 64) a.rules |= std::uint64_t{1} << rule;
        a.severities |= 1u << static_cast<int>(severity);
      });
  AlertSums sums(by_series.begin(), by_series.end());
  std::sort(sums.begin(), sums.end(),
            [](const auto& x, const auto& y) { return x.first < y.first; });
  return sums;
}

Result<AttentionPick> PickAttention(const ReadView& view, const AlertSums& sums,
                                    const AttentionQuery& q) {
  const auto& policies = view.settings->policies;
  const std::optional<monitors::Severity> severity =
      q.severity.empty() ? std::nullopt : monitors::ParseSeverity(q.severity);
  Result<LabelFilter> labels = LabelFilter::Parse(q.label);
  if (!labels) return labels.status();
  std::vector<PolicyCount> counts(policies.size());
  AttentionPick pick;
  std::vector<AttentionPick::Entry> rows;
  std::size_t cursor = 0;  // sums walked beside the series, both by ascending index
  for (std::size_t i = 0; i < view.size(); ++i) {
    const ReadRow& r = view.rows[i];
    while (cursor < sums.size() && sums[cursor].first < i) ++cursor;
    const AlertSum* a =
        cursor < sums.size() && sums[cursor].first == i ? &sums[cursor].second : nullptr;
    const SeriesStatus status = StatusOf(view, i);
    const bool active = status == SeriesStatus::kAlerting;
    const bool stale = view.stale(i);
    const bool near = !active && r.closeness >= q.near && !a;
    PolicyCount& c = counts[r.policy];
    ++c.series;
    if (a) {
      c.open += a->open;
      c.acknowledged += a->acknowledged;
      c.snoozed += a->snoozed;
    }
    c.alerting += status == SeriesStatus::kAlerting;
    c.stale += status == SeriesStatus::kStale;
    c.warming += status == SeriesStatus::kWarming;
    c.in_control += status == SeriesStatus::kOk;
    c.near += near;
    int group = kOther;
    if (a && a->open)
      group = kOpen;
    else if (a && a->acknowledged)
      group = kAcknowledged;
    else if (a && a->snoozed)
      group = kSnoozed;
    else if (near)
      group = kNear;
    // The view asked for.
    if (q.state == "attention" && group > kNear) continue;
    if (q.state == "open" && group != kOpen) continue;
    if (q.state == "acknowledged" && !(a && a->acknowledged)) continue;
    if (q.state == "snoozed" && !(a && a->snoozed)) continue;
    if (q.state == "near" && group != kNear) continue;
    if (q.state == "unresolved" && !a) continue;
    if (q.state == "stale" && !stale) continue;
    // Filters.
    const config::Policy& p = policies[r.policy];
    if (!q.policy.empty() && p.name != q.policy) continue;
    if (severity && !(a && (a->severities >> static_cast<int>(*severity) & 1))) continue;
    if (!q.rule.empty()) {
      bool match = false;
      for (std::size_t k = 0; k < p.spec.rules.size() && !match; ++k)
        if (p.spec.rules[k].name == q.rule)
          match = (a && (a->rules >> k & 1)) || static_cast<int>(k) == r.nearest;
      if (!match) continue;
    }
    if (!ContainsNoCase(view.key(i), q.q)) continue;
    if (!labels->Matches(view.labels(i))) continue;
    rows.push_back({static_cast<std::uint32_t>(i), group, a ? a->worst : -1, r.closeness, r.nearest,
                    a != nullptr});
  }
  auto before = [&view](const AttentionPick::Entry& x, const AttentionPick::Entry& y) {
    if (x.group != y.group) return x.group < y.group;
    if (x.worst != y.worst) return x.worst > y.worst;
    if (x.closeness != y.closeness) return x.closeness > y.closeness;
    return view.key(x.index) < view.key(y.index);
  };
  const std::size_t off = std::min(rows.size(), static_cast<std::size_t>(q.offset));
  const std::size_t end = std::min(rows.size(), off + static_cast<std::size_t>(q.limit));
  std::partial_sort(rows.begin(), rows.begin() + static_cast<long>(end), rows.end(), before);
  pick.total = rows.size();
  pick.page.assign(rows.begin() + static_cast<long>(off), rows.begin() + static_cast<long>(end));
  pick.counts = json::array();
  for (std::size_t i = 0; i < policies.size(); ++i) {
    const PolicyCount& c = counts[i];
    pick.counts.push_back({{"policy", policies[i].name},
                           {"series", c.series},
                           {"open", c.open},
                           {"acknowledged", c.acknowledged},
                           {"snoozed", c.snoozed},
                           {"alerting", c.alerting},
                           {"stale", c.stale},
                           {"warming", c.warming},
                           {"in_control", c.in_control},
                           {"near", c.near}});
  }
  return pick;
}

Result<json> AttentionRows(Engine& engine, const ReadView& view, const AttentionPick& pick,
                           const AttentionQuery& q) {
  json page = json::array();
  for (const AttentionPick::Entry& e : pick.page) {
    const std::optional<SeriesView> found = engine.SeriesAt(e.index);
    if (!found || found->key != view.key(e.index)) continue;  // defensive: indices are stable
    const SeriesView& v = *found;
    const monitors::SeriesState& s = *v.state;
    const config::Policy& p = *v.spec;
    const std::string key(v.key);
    json row{
        {"key", key},
        {"policy", v.policy},
        {"labels", json::parse(v.labels, nullptr, false)},
        {"status", StatusName(StatusOf(s, p, v.stale))},
        {"group", GroupName(e.group)},
        {"closeness", std::isfinite(e.closeness) ? json(e.closeness) : json(nullptr)},
        {"nearest_rule", e.nearest >= 0 && static_cast<std::size_t>(e.nearest) < p.spec.rules.size()
                             ? json(p.spec.rules[static_cast<std::size_t>(e.nearest)].name)
                             : json(nullptr)},
        {"last_period",
         s.seen ? json(monitors::FormatPeriod(p.period, s.last_period)) : json(nullptr)}};
    const bool warming = Warming(s, p);
    row["trigg_signal"] = warming ? json(nullptr) : Number(monitors::TriggSignal(s.stats));
    row["cusum_signal"] = warming ? json(nullptr) : Number(monitors::CusumSignal(s.stats));
    std::optional<double> next;
    if (s.started)
      next = monitors::ForecastNext(p.spec.method, monitors::EffectiveConstants(p.spec, s), s.model,
                                    s.next_index);
    row["forecast"] = Number(next);
    json holding = json::array();
    for (std::size_t r = 0; r < p.spec.rules.size(); ++r)
      if (s.active >> r & 1) holding.push_back(p.spec.rules[r].name);
    row["holding"] = holding;
    // Unresolved alerts, newest first.
    row["alerts"] = json::array();
    if (e.alerts) {
      AlertFilter f;
      f.state = "unresolved";
      f.series = key;
      f.limit = 64;
      Result<AlertPage> alerts = ListAlerts(engine.db(), f);
      if (!alerts) return alerts.status();
      row["alerts"] = std::move(alerts->alerts);
    }
    // The last periods: actuals and the forecast made before each.
    json recent_actual = json::array(), recent_forecast = json::array();
    row["last_actual"] = nullptr;
    row["last_forecast"] = nullptr;
    if (s.seen && q.recent > 0) {
      std::vector<HistoryRow> history;
      std::string error;
      if (!engine.History(key, s.last_period - q.recent + 1, s.last_period, history, error))
        return Status::StoreFailed(error);
      for (const HistoryRow& h : history) {
        recent_actual.push_back(h.observed ? json(h.actual) : json(nullptr));
        recent_forecast.push_back(h.observed && h.result.has_forecast ? json(h.result.forecast)
                                                                      : json(nullptr));
      }
      if (!history.empty() && history.back().observed) {
        row["last_actual"] = history.back().actual;
        if (history.back().result.has_forecast)
          row["last_forecast"] = history.back().result.forecast;
      }
      row["recent_from"] = history.empty()
                               ? json(nullptr)
                               : json(monitors::FormatPeriod(p.period, history.front().period));
    }
    row["recent_actual"] = std::move(recent_actual);
    row["recent_forecast"] = std::move(recent_forecast);
    page.push_back(std::move(row));
  }
  return json{{"counts", pick.counts}, {"total", pick.total}, {"offset", q.offset},
              {"limit", q.limit},      {"near", q.near},      {"state", q.state},
              {"rows", page}};
}

}  // namespace forewarden
