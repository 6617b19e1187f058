#include "daemon/store/alert_reads.h"

#include <algorithm>
#include <nlohmann/json.hpp>

#include "daemon/common/iso_time.h"
#include "monitors/period.h"

namespace forewarden {

using json = nlohmann::json;

namespace {

constexpr const char* kAlertColumns =
    "SELECT id, series_key, policy, rule, signal, severity, state, opened_period, opened_ms, "
    "updated_ms, value, limit_value, ack_by, note, snooze_until_period, snooze_until_ms, "
    "resolved_period, resolved_ms, resolved_by, resolved_reason, group_id, diagnosis FROM alerts "
    "WHERE id = ?1";

// The alert object of a row selected with kAlertColumns.
json AlertRow(const Stmt& q) {
  json j;
  j["id"] = q.Int(0);
  auto text_or_null = [&](int col) -> json {
    return q.IsNull(col) ? json(nullptr) : json(std::string(q.Text(col)));
  };
  auto time_or_null = [&](int col) -> json {
    return q.IsNull(col) ? json(nullptr) : json(IsoTime(q.Int(col)));
  };
  j["series"] = std::string(q.Text(1));
  j["policy"] = std::string(q.Text(2));
  j["rule"] = std::string(q.Text(3));
  j["signal"] = std::string(q.Text(4));
  j["severity"] = std::string(q.Text(5));
  j["state"] = std::string(q.Text(6));
  j["opened_period"] = std::string(q.Text(7));
  j["opened_at"] = IsoTime(q.Int(8));
  j["updated_at"] = IsoTime(q.Int(9));
  j["value"] = q.IsNull(10) ? json(nullptr) : json(q.Double(10));
  j["limit"] = q.IsNull(11) ? json(nullptr) : json(q.Double(11));
  j["acknowledged_by"] = text_or_null(12);
  j["note"] = text_or_null(13);
  j["snoozed_until_period"] = text_or_null(14);
  j["snoozed_until"] = time_or_null(15);
  j["resolved_period"] = text_or_null(16);
  j["resolved_at"] = time_or_null(17);
  j["resolved_by"] = text_or_null(18);
  j["resolved_reason"] = text_or_null(19);
  j["group"] = q.IsNull(20) ? json(nullptr) : json(q.Int(20));
  // the diagnosis made as it opened (schema 5; null for storm members and older alerts)
  j["diagnosis"] = nullptr;
  if (!q.IsNull(21)) {
    json d = json::parse(q.Text(21), nullptr, false);
    if (!d.is_discarded()) j["diagnosis"] = std::move(d);
  }
  return j;
}

// Selects alert `id` with the prepared kAlertColumns statement `q`.
bool SelectAlert(Stmt& q, std::int64_t id, json& out, std::string& error, Db& db) {
  q.Reset();
  if (!q.Bind(1, id).Step()) {
    error = db.error();
    return false;
  }
  if (!q.Row()) {
    error = "no alert " + std::to_string(id);
    return false;
  }
  out = AlertRow(q);
  q.Reset();
  return true;
}

}  // namespace

Result<json> AlertObject(Db& db, std::int64_t id) {
  Stmt q = db.Prepare(kAlertColumns);
  if (!q.valid()) return Status::StoreFailed(db.error());
  json j;
  std::string error;
  if (!SelectAlert(q, id, j, error, db))
    return error.rfind("no alert", 0) == 0 ? Status::NotFound(error) : Status::StoreFailed(error);
  return j;
}

namespace {

json DeliveryRows(Db& db, std::int64_t event, std::string& error) {
  json list = json::array();
  Stmt q = db.Prepare(
      "SELECT sink, state, attempts, last_error FROM deliveries WHERE event_id = ?1 ORDER BY sink");
  if (!q.valid() || !q.Bind(1, event).Step()) {
    error = db.error();
    return list;
  }
  for (; q.Row(); q.Step())
    list.push_back({{"sink", std::string(q.Text(0))},
                    {"state", std::string(q.Text(1))},
                    {"attempts", q.Int(2)},
                    {"last_error", q.IsNull(3) ? json(nullptr) : json(std::string(q.Text(3)))}});
  return list;
}

}  // namespace

Result<json> AlertWithHistory(Db& db, std::int64_t id) {
  Result<json> alert = AlertObject(db, id);
  if (!alert) return alert;
  json history = json::array();
  Stmt q = db.Prepare(
      "SELECT id, kind, at_ms, actor, note FROM alert_events WHERE alert_id = ?1 ORDER BY id");
  if (!q.valid() || !q.Bind(1, id).Step()) return Status::StoreFailed(db.error());
  std::vector<std::int64_t> events;
  for (; q.Row(); q.Step()) {
    history.push_back({{"event", q.Int(0)},
                       {"kind", std::string(q.Text(1))},
                       {"at", IsoTime(q.Int(2))},
                       {"by", q.IsNull(3) ? json(nullptr) : json(std::string(q.Text(3)))},
                       {"note", q.IsNull(4) ? json(nullptr) : json(std::string(q.Text(4)))}});
    events.push_back(q.Int(0));
  }
  q.Reset();
  std::string error;
  for (std::size_t i = 0; i < events.size(); ++i) {
    history[i]["deliveries"] = DeliveryRows(db, events[i], error);
    if (!error.empty()) return Status::StoreFailed(error);
  }
  (*alert)["history"] = std::move(history);
  return alert;
}

Result<AlertPage> ListAlerts(Db& db, const AlertFilter& f) {
  // Fixed SQL fragments; every value is bound.
  std::string sql = "SELECT id FROM alerts WHERE id < ?1";
  std::vector<std::string> values;
  auto filter = [&](const std::string& value, const char* column) {
    if (value.empty()) return;
    values.push_back(value);
    sql += std::string(" AND ") + column + " = ?" + std::to_string(values.size() + 1);
  };
  if (f.state == "unresolved")
    sql += " AND state != 'resolved'";
  else
    filter(f.state, "state");
  filter(f.policy, "policy");
  filter(f.rule, "rule");
  filter(f.severity, "severity");
  if (!f.series.empty()) {  // through the series' id (indexed), not its key
    values.push_back(f.series);
    sql += " AND series_id = (SELECT id FROM series WHERE key = ?" +
           std::to_string(values.size() + 1) + ")";
  }
  if (f.group) {
    values.push_back(std::to_string(*f.group));
    sql += " AND group_id = CAST(?" + std::to_string(values.size() + 1) + " AS INTEGER)";
  }
  sql += " ORDER BY id DESC LIMIT " + std::to_string(f.limit + 1);
  Stmt q = db.Prepare(sql);
  if (!q.valid()) return Status::StoreFailed(db.error());
  q.Bind(1, f.before);
  for (std::size_t i = 0; i < values.size(); ++i) q.Bind(static_cast<int>(i + 2), values[i]);
  std::vector<std::int64_t> ids;
  if (!q.Step()) return Status::StoreFailed(db.error());
  for (; q.Row(); q.Step()) ids.push_back(q.Int(0));
  q.Reset();
  AlertPage page;
  if (static_cast<long>(ids.size()) > f.limit) {
    ids.pop_back();
    page.next_before = ids.back();
  }
  page.alerts = json::array();
  for (std::int64_t id : ids) {
    Result<json> a = AlertObject(db, id);
    if (!a) return a.status();
    page.alerts.push_back(std::move(*a));
  }
  return page;
}

Result<json> AuditOf(Db& db, const std::string& series_key, long limit) {
  Stmt q = db.Prepare(
      "SELECT at_ms, who, action, detail FROM audit WHERE series_key = ?1 ORDER BY id DESC "
      "LIMIT ?2");
  if (!q.valid()) return Status::StoreFailed(db.error());
  q.Bind(1, series_key).Bind(2, static_cast<std::int64_t>(limit));
  json out = json::array();
  if (!q.Step()) return Status::StoreFailed(db.error());
  for (; q.Row(); q.Step())
    out.push_back({{"at", IsoTime(q.Int(0))},
                   {"who", std::string(q.Text(1))},
                   {"action", std::string(q.Text(2))},
                   {"detail", std::string(q.Text(3))}});
  q.Reset();
  return out;
}

Result<json> ListDeliveries(Db& db, const std::string& state, const std::string& sink) {
  Stmt q = db.Prepare(
      "SELECT d.event_id, d.sink, d.state, d.attempts, d.last_error, e.kind, e.alert_id, "
      "e.group_id, e.at_ms FROM deliveries d JOIN alert_events e ON e.id = d.event_id "
      "WHERE d.state = ?1 AND (?2 = '' OR d.sink = ?2) ORDER BY d.event_id LIMIT 1000");
  if (!q.valid() || !q.Bind(1, state).Bind(2, sink).Step()) return Status::StoreFailed(db.error());
  json list = json::array();
  for (; q.Row(); q.Step())
    list.push_back({{"event", q.Int(0)},
                    {"sink", std::string(q.Text(1))},
                    {"state", std::string(q.Text(2))},
                    {"attempts", q.Int(3)},
                    {"last_error", q.IsNull(4) ? json(nullptr) : json(std::string(q.Text(4)))},
                    {"kind", std::string(q.Text(5))},
                    {"alert", q.IsNull(6) ? json(nullptr) : json(q.Int(6))},
                    {"group", q.IsNull(7) ? json(nullptr) : json(q.Int(7))},
                    {"at", IsoTime(q.Int(8))}});
  return list;
}

namespace {

std::string PercentEncoded(const std::string& prefix, const std::string& key) {
  std::string out = prefix;
  static const char* kHex = "0123456789ABCDEF";
  for (unsigned char c : key) {
    if (std::isalnum(c) || c == '-' || c == '_' || c == '.' || c == '~') {
      out += static_cast<char>(c);
    } else {
      out += '%';
      out += kHex[c >> 4];
      out += kHex[c & 15];
    }
  }
  return out;
}

}  // namespace

std::string SeriesUrl(const std::string& base, const std::string& key) {
  return PercentEncoded(base + "/v1/series/", key);
}

std::string SeriesPageUrl(const std::string& base, const std::string& key) {
  return PercentEncoded(base + "/#/series/", key);
}

std::string PublicUrl(const config::Settings& settings) {
  std::string url = settings.alerts.public_url;
  if (url.empty()) url = "http://" + settings.server.listen;
  while (!url.empty() && url.back() == '/') url.pop_back();
  return url;
}

Status Notifications::Open(Db& db, std::string install_id, std::string public_url) {
  db_ = &db;
  install_id_ = std::move(install_id);
  public_url_ = std::move(public_url);
  event_ = db.Prepare(
      "SELECT kind, at_ms, actor, note, severity, value, detail, alert_id, group_id "
      "FROM alert_events WHERE id = ?1");
  alert_ = db.Prepare(kAlertColumns);
  group_ = db.Prepare(
      "SELECT policy, rule, severity, members, opened_ms, resolved_ms FROM alert_groups WHERE id = "
      "?1");
  sample_ = db.Prepare("SELECT series_key FROM alerts WHERE group_id = ?1 ORDER BY id LIMIT 20");
  for (const Stmt* q : {&event_, &alert_, &group_, &sample_})
    if (!q->valid()) return Status::StoreFailed("delivery: " + db.error());
  return Status::Ok();
}

namespace {

std::string Short(double v) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.4g", v);
  return buf;
}

const char* StateAfter(const std::string& kind) {
  if (kind == "acknowledged") return "acknowledged";
  if (kind == "snoozed") return "snoozed";
  if (kind == "resolved") return "resolved";
  return "open";
}

}  // namespace

bool Notifications::GroupInto(std::int64_t group, const std::string& kind, json& out,
                              std::string& error) {
  group_.Reset();
  if (!group_.Bind(1, group).Step() || !group_.Row()) {
    error = "no alert group " + std::to_string(group) + " " + db_->error();
    group_.Reset();
    return false;
  }
  json g{{"id", group},
         {"policy", std::string(group_.Text(0))},
         {"rule", std::string(group_.Text(1))},
         {"severity", std::string(group_.Text(2))},
         {"series_count", group_.Int(3)},
         {"opened_at", IsoTime(group_.Int(4))},
         {"url", public_url_ + "/v1/alerts?group=" + std::to_string(group)}};
  group_.Reset();
  json sample = json::array();
  sample_.Reset();
  if (sample_.Bind(1, group).Step())
    for (; sample_.Row(); sample_.Step()) sample.push_back(std::string(sample_.Text(0)));
  sample_.Reset();
  g["series_sample"] = sample;
  out["summary"] = kind == "group_opened"
                       ? std::to_string(g["series_count"].get<std::int64_t>()) +
                             " series of policy " + g["policy"].get<std::string>() + " opened " +
                             g["rule"].get<std::string>() + " in one batch (a whole-feed problem?)"
                       : "every series of group " + std::to_string(group) + " (" +
                             g["policy"].get<std::string>() + ", " + g["rule"].get<std::string>() +
                             ") is clear again";
  out["group"] = std::move(g);
  return true;
}

bool Notifications::EventInto(std::int64_t event, json& out, std::string& error) {
  event_.Reset();
  if (!event_.Bind(1, event).Step() || !event_.Row()) {
    error = "no alert event " + std::to_string(event) + " " + db_->error();
    event_.Reset();
    return false;
  }
  const std::string kind(event_.Text(0));
  const std::int64_t at = event_.Int(1);
  const std::string actor = event_.IsNull(2) ? "" : std::string(event_.Text(2));
  const std::string note = event_.IsNull(3) ? "" : std::string(event_.Text(3));
  const std::string severity = event_.IsNull(4) ? "" : std::string(event_.Text(4));
  const bool has_value = !event_.IsNull(5);
  const double value = has_value ? event_.Double(5) : 0.0;
  const std::string detail = event_.IsNull(6) ? "" : std::string(event_.Text(6));
  const std::int64_t alert = event_.IsNull(7) ? 0 : event_.Int(7);
  const std::int64_t group = event_.IsNull(8) ? 0 : event_.Int(8);
  event_.Reset();
  out = json{{"event_id", event},
             {"idempotency_key", install_id_ + "-" + std::to_string(event)},
             {"kind", kind},
             {"at", IsoTime(at)}};
  if (!alert) return GroupInto(group, kind, out, error);
  json a;
  if (!SelectAlert(alert_, alert, a, error, *db_)) return false;
  // The alert as it was at the event: its state and severity then; the signal value where the
  // event has one.
  a["state"] = StateAfter(kind);
  if (!severity.empty()) a["severity"] = severity;
  if (has_value) a["value"] = value;
  a["url"] = SeriesUrl(public_url_, a["series"].get<std::string>());
  a["page_url"] = SeriesPageUrl(public_url_, a["series"].get<std::string>());
  std::string summary = kind + " " + a["rule"].get<std::string>() + " on " +
                        a["series"].get<std::string>() + " (" + a["policy"].get<std::string>() +
                        "): " + a["severity"].get<std::string>() + " " +
                        a["signal"].get<std::string>();
  // appended piece by piece (GCC 12 warns wrongly about `"literal" + std::string&&`)
  if (a["value"].is_number()) summary.append(" ").append(Short(a["value"].get<double>()));
  if (a["limit"].is_number())
    summary.append(" (limit ").append(Short(a["limit"].get<double>())).append(")");
  summary.append(" since ").append(a["opened_period"].get<std::string>());
  if (!actor.empty()) summary.append(", by ").append(actor);
  if (kind == "snoozed" && !detail.empty()) summary.append(" until ").append(detail);
  if (kind == "resolved" && !detail.empty()) summary.append(" (").append(detail).append(")");
  if (!note.empty()) summary.append(": ").append(note);
  if (kind == "opened" && a["diagnosis"].is_object() && a["diagnosis"].contains("advice"))
    summary.append(". ").append(a["diagnosis"]["advice"].get<std::string>());
  out["summary"] = summary;
  if (kind == "escalated" && !detail.empty()) out["previous_severity"] = detail;
  if (!actor.empty()) out["by"] = actor;
  if (!note.empty()) out["note"] = note;
  out["alert"] = std::move(a);
  return true;
}

bool Notifications::CurrentInto(std::int64_t alert, json& out, std::string& error) {
  json a;
  if (!SelectAlert(alert_, alert, a, error, *db_)) return false;
  a["url"] = SeriesUrl(public_url_, a["series"].get<std::string>());
  a["page_url"] = SeriesPageUrl(public_url_, a["series"].get<std::string>());
  out = json{{"kind", "opened"}, {"alert", std::move(a)}};
  out["summary"] = "open " + out["alert"]["rule"].get<std::string>() + " on " +
                   out["alert"]["series"].get<std::string>();
  return true;
}

json DiagnosisObject(const monitors::AlertDiagnosis& d, monitors::PeriodKind period) {
  const monitors::Diagnosis& x = d.diagnosis;
  return {{"change_began", monitors::FormatPeriod(period, d.began)},
          {"kind", monitors::ChangeKindName(x.kind)},
          {"level", x.level},
          {"level_lower", x.lower},
          {"level_upper", x.upper},
          {"level_before", x.before},
          {"action", monitors::SuggestedActionName(x.action)},
          {"advice", x.advice}};
}

Result<json> Notifications::Event(std::int64_t event) {
  json out;
  if (std::string error; !EventInto(event, out, error)) return Status::StoreFailed(error);
  return out;
}

Result<json> Notifications::Current(std::int64_t alert) {
  json out;
  if (std::string error; !CurrentInto(alert, out, error)) return Status::StoreFailed(error);
  return out;
}

Status Notifications::Group(std::int64_t group, const std::string& kind, json& out) {
  if (std::string error; !GroupInto(group, kind, out, error)) return Status::StoreFailed(error);
  return Status::Ok();
}

}  // namespace forewarden
