// Reads of the alert tables for the API and the delivery worker: an alert row as JSON, and the
// notifications built at delivery time from an event row and its alert's (or group's) row.
#pragma once

#include <cstdint>
#include <string>

#include <nlohmann/json.hpp>

#include "config/settings.h"
#include "daemon/store/sqlite.h"

namespace forewarden {

// The JSON text of an alert row for the API (alerts.id = `id`).
bool AlertJson(Db& db, std::int64_t id, std::string& json_text, std::string& error);

// The service's base URL in notifications: alerts.public_url, else http://<server.listen>.
std::string PublicUrl(const config::Settings& settings);
// The API URL of a series under `base` (the key percent-encoded).
std::string SeriesUrl(const std::string& base, const std::string& key);

// Notifications built at delivery time from an event row and its alert's (or group's) row: the
// outbox stores facts, not message text. Used by the delivery worker on its own connection.
class Notifications {
 public:
  bool Open(Db& db, std::string install_id, std::string public_url, std::string& error);
  void SetPublicUrl(std::string url) { public_url_ = std::move(url); }
  // {"event_id", "idempotency_key", "kind", "at", "summary", "alert": {...} | "group": {...},
  //  "by"?, "note"?, "previous_severity"?}; the alert as it was at the event (state, severity,
  //  value), with "url".
  bool Event(std::int64_t event, nlohmann::json& out, std::string& error);
  // An unresolved alert as it is now ({"kind": "opened", "summary", "alert"}), for re-sends.
  bool Current(std::int64_t alert, nlohmann::json& out, std::string& error);
  // Fills "group" and "summary" of a group event.
  bool Group(std::int64_t group, const std::string& kind, nlohmann::json& out, std::string& error);

 private:
  Db* db_ = nullptr;
  std::string install_id_, public_url_;
  Stmt event_, alert_, group_, sample_;
};

}  // namespace forewarden
