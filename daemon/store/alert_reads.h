// Reads of the alert tables for the API and the delivery worker: an alert row as JSON, and the
// notifications built at delivery time from an event row and its alert's (or group's) row.
#pragma once

#include <cstdint>
#include <optional>
#include <string>

#include <nlohmann/json.hpp>

#include "config/settings.h"
#include "daemon/common/status.h"
#include "daemon/store/sqlite.h"
#include "monitors/diagnosis.h"

namespace forewarden {

// An alert row as the API shows it; not found when there is no alert `id`.
Result<nlohmann::json> AlertObject(Db& db, std::int64_t id);
// An alert's diagnosis as the API, notifications and the alert row give it: change_began,
// kind, level with level_lower/level_upper, level_before, action, advice.
nlohmann::json DiagnosisObject(const monitors::AlertDiagnosis& d, monitors::PeriodKind period);
// The same with "history": its events, each with its deliveries.
Result<nlohmann::json> AlertWithHistory(Db& db, std::int64_t id);

// A page of alerts, newest first (ids below `before`); empty strings filter nothing.
struct AlertFilter {
  std::string state;  // open, acknowledged, snoozed, resolved or unresolved
  std::string policy, rule, severity, series;
  std::optional<std::int64_t> group;
  long limit = 100;
  std::int64_t before = INT64_MAX;
};
struct AlertPage {
  nlohmann::json alerts;
  std::optional<std::int64_t> next_before;  // when there are more
};
Result<AlertPage> ListAlerts(Db& db, const AlertFilter& filter);

// The audit log of a series (resets by hand), newest first, at most `limit`:
// [{"at", "who", "action", "detail"}].
Result<nlohmann::json> AuditOf(Db& db, const std::string& series_key, long limit);

// Deliveries in `state` (dead, pending, delivered) of `sink` (every sink when empty), oldest
// event first, at most 1,000.
Result<nlohmann::json> ListDeliveries(Db& db, const std::string& state, const std::string& sink);

// The service's base URL in notifications: alerts.public_url, else http://<server.listen>.
std::string PublicUrl(const config::Settings& settings);
// The API URL of a series under `base` (the key percent-encoded).
std::string SeriesUrl(const std::string& base, const std::string& key);
// The planner page's view of a series under `base` (web/page/app.js, "#/series/KEY").
std::string SeriesPageUrl(const std::string& base, const std::string& key);

// Notifications built at delivery time from an event row and its alert's (or group's) row: the
// outbox stores facts, not message text. Used by the delivery worker on its own connection.
class Notifications {
 public:
  Status Open(Db& db, std::string install_id, std::string public_url);
  void SetPublicUrl(std::string url) { public_url_ = std::move(url); }
  // {"event_id", "idempotency_key", "kind", "at", "summary", "alert": {...} | "group": {...},
  //  "by"?, "note"?, "previous_severity"?}; the alert as it was at the event (state, severity,
  //  value), with "url" and "page_url". Not found or store failed.
  Result<nlohmann::json> Event(std::int64_t event);
  // An unresolved alert as it is now ({"kind": "opened", "summary", "alert"}), for re-sends.
  Result<nlohmann::json> Current(std::int64_t alert);
  // Fills "group" and "summary" of a group event into `out`.
  Status Group(std::int64_t group, const std::string& kind, nlohmann::json& out);

 private:
  bool EventInto(std::int64_t event, nlohmann::json& out, std::string& error);
  bool CurrentInto(std::int64_t alert, nlohmann::json& out, std::string& error);
  bool GroupInto(std::int64_t group, const std::string& kind, nlohmann::json& out,
                 std::string& error);
  Db* db_ = nullptr;
  std::string install_id_, public_url_;
  Stmt event_, alert_, group_, sample_;
};

}  // namespace forewarden
