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
  return Status::Ok();
}

namespace {

// What the unresolved alerts of one series add up to.
struct AlertSum {
  int open = 0, acknowledged = 0, snoozed = 0;
  int worst = -1;           // highest severity (monitors::Severity), -1: none
  std::uint64_t rules = 0;  // rules with an unresolved alert
  unsigned severities = 0;  // bit per severity
};

enum Group { kOpen = 0, kAcknowledged = 1, kNear = 2, kSnoozed = 3, kOther = 4 };
const char* GroupName(int g) {
  static const char* kNames[] = {"open", "acknowledged", "near", "snoozed", "other"};
  return kNames[g];
}

// A series' largest signal over its rule's limit, and that rule.
std::pair<double, int> Closeness(const monitors::SeriesState& s, const config::Policy& p) {
  double best = 0;
  int rule = -1;
  if (Warming(s, p)) return {0, -1};
  const auto trigg = monitors::TriggSignal(s.stats), cusum = monitors::CusumSignal(s.stats);
  for (std::size_t i = 0; i < p.spec.rules.size() && i < s.rules.size(); ++i) {
    const monitors::RuleSpec& r = p.spec.rules[i];
    double c = 0;
    if (r.signal == monitors::SignalKind::kTrigg && trigg && r.limit > 0)
      c = monitors::Excursion(r.direction, *trigg) / r.limit;
    else if (r.signal == monitors::SignalKind::kCusum && r.periods == 0 && cusum && r.limit > 0)
      c = monitors::Excursion(r.direction, *cusum) / r.limit;
    if ((s.rules[i].active || s.rules[i].run > 0) && c < 1) c = 1;
    if (c > best) {
      best = c;
      rule = static_cast<int>(i);
    }
  }
  return {best, rule};
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

Result<json> AttentionPage(Engine& engine, const AttentionQuery& q) {
  const auto& policies = engine.settings().policies;
  // The unresolved alerts, summed by series and sorted by series index: the pass over the
  // series below goes in index order and walks this list beside it.
  std::vector<std::pair<std::size_t, AlertSum>> sums;
  {
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
    sums.assign(by_series.begin(), by_series.end());
    std::sort(sums.begin(), sums.end(),
              [](const auto& x, const auto& y) { return x.first < y.first; });
  }
  std::size_t cursor = 0;
  std::vector<PolicyCount> counts(policies.size());
  auto policy_index = [&](const config::Policy* p) -> std::size_t {
    for (std::size_t i = 0; i < policies.size(); ++i)
      if (&policies[i] == p) return i;
    return policies.size();
  };
  const std::optional<monitors::Severity> severity =
      q.severity.empty() ? std::nullopt : monitors::ParseSeverity(q.severity);
  Result<LabelFilter> labels = LabelFilter::Parse(q.label);
  if (!labels) return labels.status();

  struct Entry {
    SeriesView view;
    int group;
    int worst;
    double closeness;
    int nearest;
    bool alerts;  // has an unresolved alert
  };
  std::vector<Entry> rows;
  engine.ForEachSeries([&](const SeriesView& v) {
    const std::size_t pi = policy_index(v.spec);
    const auto [closeness, nearest] = Closeness(*v.state, *v.spec);
    while (cursor < sums.size() && sums[cursor].first < v.index) ++cursor;
    const AlertSum* a =
        cursor < sums.size() && sums[cursor].first == v.index ? &sums[cursor].second : nullptr;
    const SeriesStatus status = StatusOf(*v.state, *v.spec, v.stale);
    const bool near = !v.state->active && closeness >= q.near && !a;
    if (pi < counts.size()) {
      PolicyCount& c = counts[pi];
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
    }
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
    if (q.state == "attention" && group > kNear) return;
    if (q.state == "open" && group != kOpen) return;
    if (q.state == "acknowledged" && !(a && a->acknowledged)) return;
    if (q.state == "snoozed" && !(a && a->snoozed)) return;
    if (q.state == "near" && group != kNear) return;
    if (q.state == "unresolved" && !a) return;
    if (q.state == "stale" && !v.stale) return;
    // Filters.
    if (!q.policy.empty() && v.policy != q.policy) return;
    if (severity && !(a && (a->severities >> static_cast<int>(*severity) & 1))) return;
    if (!q.rule.empty()) {
      bool match = false;
      for (std::size_t i = 0; i < v.spec->spec.rules.size() && !match; ++i)
        if (v.spec->spec.rules[i].name == q.rule)
          match = (a && (a->rules >> i & 1)) || static_cast<int>(i) == nearest;
      if (!match) return;
    }
    if (!ContainsNoCase(v.key, q.q)) return;
    if (!labels->Matches(v.labels)) return;
    rows.push_back({v, group, a ? a->worst : -1, closeness, nearest, a != nullptr});
  });
  auto before = [](const Entry& x, const Entry& y) {
    if (x.group != y.group) return x.group < y.group;
    if (x.worst != y.worst) return x.worst > y.worst;
    if (x.closeness != y.closeness) return x.closeness > y.closeness;
    return x.view.key < y.view.key;
  };
  const std::size_t off = std::min(rows.size(), static_cast<std::size_t>(q.offset));
  const std::size_t end = std::min(rows.size(), off + static_cast<std::size_t>(q.limit));
  std::partial_sort(rows.begin(), rows.begin() + static_cast<long>(end), rows.end(), before);

  json page = json::array();
  for (std::size_t i = off; i < end; ++i) {
    const Entry& e = rows[i];
    const SeriesView& v = e.view;
    const monitors::SeriesState& s = *v.state;
    const config::Policy& p = *v.spec;
    const std::string key(v.key);
    json row{{"key", key},
             {"policy", v.policy},
             {"labels", json::parse(v.labels, nullptr, false)},
             {"status", StatusName(StatusOf(s, p, v.stale))},
             {"group", GroupName(e.group)},
             {"closeness", std::isfinite(e.closeness) ? json(e.closeness) : json(nullptr)},
             {"nearest_rule", e.nearest >= 0 ? json(p.spec.rules[e.nearest].name) : json(nullptr)},
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
    AlertFilter f;
    f.state = "unresolved";
    f.series = key;
    f.limit = 64;
    if (e.alerts) {
      Result<AlertPage> alerts = ListAlerts(engine.db(), f);
      if (!alerts) return alerts.status();
      row["alerts"] = std::move(alerts->alerts);
    } else {
      row["alerts"] = json::array();
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
  json count_list = json::array();
  for (std::size_t i = 0; i < policies.size(); ++i) {
    const PolicyCount& c = counts[i];
    count_list.push_back({{"policy", policies[i].name},
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
  return json{{"counts", count_list}, {"total", rows.size()}, {"offset", q.offset},
              {"limit", q.limit},     {"near", q.near},       {"state", q.state},
              {"rows", page}};
}

}  // namespace forewarden
