#include "daemon/store/handover.h"

#include <sqlite3.h>

#include <algorithm>
#include <charconv>
#include <cmath>
#include <set>

namespace forewarden {
namespace {

using json = nlohmann::json;

// A row as {column: value}, leaving out `skip`; blobs do not occur in the tables carried.
json RowObject(const Stmt& q, const std::set<std::string>& skip) {
  json row = json::object();
  for (int c = 0; c < q.Columns(); ++c) {
    const std::string name = q.Name(c);
    if (skip.count(name)) continue;
    switch (q.Type(c)) {
      case SQLITE_INTEGER:
        row[name] = q.Int(c);
        break;
      case SQLITE_FLOAT:
        row[name] = q.Double(c);
        break;
      case SQLITE_TEXT:
        row[name] = std::string(q.Text(c));
        break;
      default:
        row[name] = nullptr;
    }
  }
  return row;
}

std::vector<std::string> ColumnsOf(Db& db, const std::string& table) {
  std::vector<std::string> out;
  Stmt q = db.Prepare("SELECT name FROM pragma_table_info('" + table + "')");
  while (q.valid() && q.Step() && q.Row()) out.emplace_back(q.Text(0));
  return out;
}

// Binds a JSON scalar; false for arrays and objects.
bool BindValue(Stmt& q, int i, const json& v) {
  if (v.is_null())
    q.BindNull(i);
  else if (v.is_number_integer())
    q.Bind(i, v.get<std::int64_t>());
  else if (v.is_number())
    q.Bind(i, v.get<double>());
  else if (v.is_string())
    q.Bind(i, v.get_ref<const std::string&>());
  else if (v.is_boolean())
    q.Bind(i, static_cast<std::int64_t>(v.get<bool>()));
  else
    return false;
  return true;
}

}  // namespace

std::string HexOf(std::string_view bytes) {
  static const char* kDigits = "0123456789abcdef";
  std::string out;
  out.reserve(bytes.size() * 2);
  for (unsigned char c : bytes) {
    out.push_back(kDigits[c >> 4]);
    out.push_back(kDigits[c & 15]);
  }
  return out;
}

bool FromHex(std::string_view hex, std::string& out) {
  if (hex.size() % 2) return false;
  auto digit = [](char c) -> int {
    if (c >= '0' && c <= '9') return c - '0';
    if (c >= 'a' && c <= 'f') return c - 'a' + 10;
    if (c >= 'A' && c <= 'F') return c - 'A' + 10;
    return -1;
  };
  out.clear();
  out.reserve(hex.size() / 2);
  for (std::size_t i = 0; i < hex.size(); i += 2) {
    const int hi = digit(hex[i]), lo = digit(hex[i + 1]);
    if (hi < 0 || lo < 0) return false;
    out.push_back(static_cast<char>(hi * 16 + lo));
  }
  return true;
}

Status Handover::Failed(const std::string& what) const {
  return Status::StoreFailed("store: handover: " + what + ": " + db_->error());
}

Status Handover::Open(Db& db) {
  db_ = &db;
  checkpoint_ = db.Prepare("SELECT state FROM checkpoints WHERE series_id = ?1");
  actuals_ = db.Prepare("SELECT period, value FROM actuals WHERE series_id = ?1 ORDER BY period");
  adjustments_ =
      db.Prepare("SELECT period, level FROM adjustments WHERE series_id = ?1 ORDER BY period, seq");
  events_ = db.Prepare(
      "SELECT e.* FROM alert_events e JOIN alerts a ON a.id = e.alert_id "
      "WHERE a.series_id = ?1 AND EXISTS(SELECT 1 FROM deliveries d "
      "WHERE d.event_id = e.id AND d.state = 'pending') ORDER BY e.id");
  alerts_ = db.Prepare("SELECT * FROM alerts WHERE series_id = ?1 AND state != 'resolved'");
  alert_by_id_ = db.Prepare("SELECT * FROM alerts WHERE id = ?1");
  series_by_key_ = db.Prepare("SELECT id FROM series WHERE key = ?1");
  insert_series_ = db.Prepare(
      "INSERT INTO series(key, policy, labels, state, part, ordinal, episodes) "
      "VALUES(?1, ?2, ?3, ?4, ?5, ?6, ?7)");
  insert_checkpoint_ = db.Prepare("INSERT INTO checkpoints(series_id, state) VALUES(?1, ?2)");
  insert_actual_ =
      db.Prepare("INSERT OR REPLACE INTO actuals(series_id, period, value) VALUES(?1, ?2, ?3)");
  insert_adjustment_ =
      db.Prepare("INSERT INTO adjustments(series_id, period, level) VALUES(?1, ?2, ?3)");
  for (const Stmt* s :
       {&checkpoint_, &actuals_, &adjustments_, &events_, &alerts_, &alert_by_id_, &series_by_key_,
        &insert_series_, &insert_checkpoint_, &insert_actual_, &insert_adjustment_})
    if (!s->valid()) return Failed("prepare");
  alert_columns_ = ColumnsOf(db, "alerts");
  event_columns_ = ColumnsOf(db, "alert_events");
  if (alert_columns_.empty() || event_columns_.empty()) return Failed("columns");
  return Status::Ok();
}

std::string Handover::Position(const SourceOffset& at, std::int32_t next_ordinal,
                               const std::string& writer) {
  return json{
      {"topic", at.topic}, {"next", at.next}, {"next_ordinal", next_ordinal}, {"writer", writer}}
      .dump();
}

Status Handover::Adopt(const std::string& topic, std::int32_t part,
                       const std::vector<std::string>& records, const std::string& position,
                       const std::vector<std::string>& sinks, std::int64_t now_ms) {
  const std::string where = "partition " + std::to_string(part) + ": ";
  SourceOffset offset{topic, part, 0};
  std::int32_t next_ordinal = 0;
  if (!position.empty()) {
    const json p = json::parse(position, nullptr, false);
    if (p.is_discarded() || !p.is_object() || !p.value("next", json()).is_number_integer() ||
        !p.value("next_ordinal", json()).is_number_integer())
      return Status::Invalid(where + "the changelog's position record does not read");
    offset.next = p["next"].get<std::int64_t>();
    next_ordinal = p["next_ordinal"].get<std::int32_t>();
  }
  if (Status dropped = DropPartition(part); !dropped) return dropped;
  for (const std::string& text : records) {
    const json r = json::parse(text, nullptr, false);
    if (r.is_discarded() || !r.is_object())
      return Status::Invalid(where + "a changelog record is not a JSON object");
    if (Status imported = Import(r, part, sinks, now_ms); !imported)
      return imported.kind() == ErrorKind::kInvalid ? imported.Prefix(where) : imported;
  }
  return SetPartition(part, next_ordinal, offset);
}

Status Handover::Export(std::int64_t id, const SeriesHead& head, std::string& text) {
  // Written by hand but for the alert rows: a record a series a commit, so it is the cost of
  // sharing (the same JSON nlohmann reads back at a restore).
  const auto str = [](std::string_view v) {
    return json(v).dump(-1, ' ', false, json::error_handler_t::replace);
  };
  const auto num = [](std::string& out, double v) {
    char buf[32];
    const auto r = std::to_chars(buf, buf + sizeof buf, v);  // shortest exact round trip
    out.append(buf, r.ptr);
  };
  text.clear();
  text.reserve(1024);
  text += "{\"key\":" + str(head.key) + ",\"policy\":" + str(head.policy) +
          ",\"labels\":" + str(head.labels) + ",\"part\":" + std::to_string(head.place.part) +
          ",\"ordinal\":" + std::to_string(head.place.ordinal) +
          ",\"episodes\":" + std::to_string(head.place.episodes) + ",\"state\":\"" +
          HexOf(head.state) + "\",\"through\":" + std::to_string(head.through) +
          ",\"checkpoint\":\"";
  checkpoint_.Bind(1, id);
  if (!checkpoint_.Step()) return Failed("checkpoint");
  if (checkpoint_.Row()) text += HexOf(checkpoint_.Blob(0));
  checkpoint_.Reset();
  text += "\",\"actuals\":[";
  actuals_.Bind(1, id);
  for (bool first = true;; first = false) {
    if (!actuals_.Step()) return Failed("actuals");
    if (!actuals_.Row()) break;
    text += first ? "[" : ",[";
    text += std::to_string(actuals_.Int(0));
    text += ',';
    num(text, actuals_.Double(1));
    text += ']';
  }
  actuals_.Reset();
  text += "],\"adjustments\":[";
  adjustments_.Bind(1, id);
  for (bool first = true;; first = false) {
    if (!adjustments_.Step()) return Failed("adjustments");
    if (!adjustments_.Row()) break;
    text += first ? "[" : ",[";
    text += std::to_string(adjustments_.Int(0));
    text += ',';
    num(text, adjustments_.Double(1));
    text += ']';
  }
  adjustments_.Reset();
  json alerts = json::array();
  std::set<std::int64_t> have;
  alerts_.Bind(1, id);
  for (;;) {
    if (!alerts_.Step()) return Failed("alerts");
    if (!alerts_.Row()) break;
    json row = RowObject(alerts_, {"series_id", "group_id"});
    have.insert(row["id"].get<std::int64_t>());
    alerts.push_back(std::move(row));
  }
  alerts_.Reset();
  json events = json::array();
  std::set<std::int64_t> resolved;
  events_.Bind(1, id);
  for (;;) {
    if (!events_.Step()) return Failed("events");
    if (!events_.Row()) break;
    json row = RowObject(events_, {"id", "group_id"});
    if (row["alert_id"].is_number_integer() && !have.count(row["alert_id"].get<std::int64_t>()))
      resolved.insert(row["alert_id"].get<std::int64_t>());
    events.push_back(std::move(row));
  }
  events_.Reset();
  for (std::int64_t a : resolved) {  // resolved alerts whose last events are not delivered yet
    alert_by_id_.Bind(1, a);
    if (!alert_by_id_.Step()) return Failed("alerts");
    if (alert_by_id_.Row()) alerts.push_back(RowObject(alert_by_id_, {"series_id", "group_id"}));
    alert_by_id_.Reset();
  }
  text += "],\"alerts\":" + alerts.dump(-1, ' ', false, json::error_handler_t::replace) +
          ",\"events\":" + events.dump(-1, ' ', false, json::error_handler_t::replace) + "}";
  return Status::Ok();
}

Status Handover::Drop(const char* where, std::int64_t arg) {
  const std::string ids = std::string("SELECT id FROM series WHERE ") + where;
  const std::string open_alerts =
      "SELECT id FROM alerts WHERE state != 'resolved' AND series_id IN (" + ids + ")";
  const std::string statements[] = {
      // pending deliveries of every alert of the series: the new owner sends them
      "DELETE FROM deliveries WHERE state = 'pending' AND event_id IN (SELECT id FROM "
      "alert_events WHERE alert_id IN (SELECT id FROM alerts WHERE series_id IN (" +
          ids + ")))",
      "DELETE FROM deliveries WHERE event_id IN (SELECT id FROM alert_events WHERE alert_id IN (" +
          open_alerts + "))",
      "DELETE FROM alert_events WHERE alert_id IN (" + open_alerts + ")",
      "DELETE FROM alerts WHERE state != 'resolved' AND series_id IN (" + ids + ")",
      "UPDATE alerts SET series_id = 0 WHERE series_id IN (" + ids + ")",
      "DELETE FROM actuals WHERE series_id IN (" + ids + ")",
      "DELETE FROM checkpoints WHERE series_id IN (" + ids + ")",
      "DELETE FROM adjustments WHERE series_id IN (" + ids + ")",
      std::string("DELETE FROM series WHERE ") + where,
  };
  for (const std::string& sql : statements) {
    Stmt q = db_->Prepare(sql);
    if (!q.valid()) return Failed("drop");
    q.Bind(1, arg);
    if (!q.Run()) return Failed("drop");
  }
  return Status::Ok();
}

Status Handover::DropPartition(std::int32_t part) {
  if (Status dropped = Drop("part = ?1", part); !dropped) return dropped;
  for (const char* sql : {"DELETE FROM partitions WHERE part = ?1",
                          "DELETE FROM source_offsets WHERE partition = ?1"}) {
    Stmt q = db_->Prepare(sql);
    if (!q.valid() || !q.Bind(1, static_cast<std::int64_t>(part)).Run()) return Failed("drop");
  }
  return Status::Ok();
}

Status Handover::SetPartition(std::int32_t part, std::int32_t next_ordinal,
                              const SourceOffset& offset) {
  Stmt a = db_->Prepare("INSERT OR REPLACE INTO partitions(part, next_ordinal) VALUES(?1, ?2)");
  Stmt b = db_->Prepare(
      "INSERT OR REPLACE INTO source_offsets(topic, partition, next_offset) VALUES(?1, ?2, ?3)");
  if (!a.valid() || !b.valid() ||
      !a.Bind(1, static_cast<std::int64_t>(part))
           .Bind(2, static_cast<std::int64_t>(next_ordinal))
           .Run() ||
      !b.Bind(1, offset.topic)
           .Bind(2, static_cast<std::int64_t>(offset.partition))
           .Bind(3, offset.next)
           .Run())
    return Failed("partition");
  return Status::Ok();
}

Status Handover::Import(const json& r, std::int32_t part, const std::vector<std::string>& sinks,
                        std::int64_t now_ms) {
  std::string field = "key";
  try {
    const std::string& key = r.at("key").get_ref<const std::string&>();
    field = "state";
    std::string state, checkpoint;
    if (!FromHex(r.at("state").get_ref<const std::string&>(), state))
      return Status::Invalid("series '" + key + "': state: not hex");
    field = "checkpoint";
    if (!FromHex(r.at("checkpoint").get_ref<const std::string&>(), checkpoint))
      return Status::Invalid("series '" + key + "': checkpoint: not hex");
    // a series of the same key held here under another partition (its producer changed keys'
    // partitions) gives way to the record
    series_by_key_.Bind(1, key);
    if (!series_by_key_.Step()) return Failed("series");
    const bool existing = series_by_key_.Row();
    const std::int64_t old = existing ? series_by_key_.Int(0) : 0;
    series_by_key_.Reset();
    if (existing)
      if (Status dropped = Drop("id = ?1", old); !dropped) return dropped;
    field = "series";
    Stmt& ins = insert_series_;
    ins.Bind(1, key)
        .Bind(2, r.at("policy").get_ref<const std::string&>())
        .Bind(3, r.at("labels").get_ref<const std::string&>())
        .BindBlob(4, state)
        .Bind(5, static_cast<std::int64_t>(part))
        .Bind(6, r.at("ordinal").get<std::int64_t>())
        .Bind(7, r.at("episodes").get<std::int64_t>());
    if (!ins.Run()) return Failed("series");
    const std::int64_t id = db_->LastInsertId();
    if (!insert_checkpoint_.Bind(1, id).BindBlob(2, checkpoint).Run()) return Failed("checkpoint");
    field = "actuals";
    Stmt& act = insert_actual_;
    for (const json& a : r.at("actuals")) {
      const double v = a.at(1).get<double>();
      if (!std::isfinite(v)) return Status::Invalid("series '" + key + "': actuals: not finite");
      if (!act.Bind(1, id).Bind(2, a.at(0).get<std::int64_t>()).Bind(3, v).Run())
        return Failed("actuals");
    }
    field = "adjustments";
    Stmt& adj = insert_adjustment_;
    for (const json& a : r.at("adjustments"))
      if (!adj.Bind(1, id)
               .Bind(2, a.at(0).get<std::int64_t>())
               .Bind(3, a.at(1).get<double>())
               .Run())
        return Failed("adjustments");
    field = "alerts";
    for (const json& a : r.at("alerts")) {
      std::string cols = "series_id", marks = "?1";
      std::vector<const json*> values;
      for (const auto& [name, v] : a.items()) {
        if (name == "series_id" || name == "group_id") continue;
        if (std::find(alert_columns_.begin(), alert_columns_.end(), name) == alert_columns_.end())
          return Status::Invalid("series '" + key + "': alerts: no column '" + name + "'");
        cols += "," + name;
        values.push_back(&v);
        marks += ",?" + std::to_string(values.size() + 1);
      }
      Stmt q = db_->Prepare("INSERT OR REPLACE INTO alerts(" + cols + ") VALUES(" + marks + ")");
      if (!q.valid()) return Failed("alerts");
      q.Bind(1, id);
      for (std::size_t i = 0; i < values.size(); ++i)
        if (!BindValue(q, static_cast<int>(i) + 2, *values[i]))
          return Status::Invalid("series '" + key + "': alerts: a value is not a scalar");
      if (!q.Run()) return Failed("alerts");
    }
    field = "events";
    for (const json& e : r.at("events")) {
      std::string cols, marks;
      std::vector<const json*> values;
      for (const auto& [name, v] : e.items()) {
        if (name == "id" || name == "group_id") continue;
        if (std::find(event_columns_.begin(), event_columns_.end(), name) == event_columns_.end())
          return Status::Invalid("series '" + key + "': events: no column '" + name + "'");
        cols += (cols.empty() ? "" : ",") + name;
        values.push_back(&v);
        marks += (marks.empty() ? "?" : ",?") + std::to_string(values.size());
      }
      if (cols.empty()) continue;
      Stmt q = db_->Prepare("INSERT INTO alert_events(" + cols + ") VALUES(" + marks + ")");
      if (!q.valid()) return Failed("events");
      for (std::size_t i = 0; i < values.size(); ++i)
        if (!BindValue(q, static_cast<int>(i) + 1, *values[i]))
          return Status::Invalid("series '" + key + "': events: a value is not a scalar");
      if (!q.Run()) return Failed("events");
      const std::int64_t event = db_->LastInsertId();
      Stmt d = db_->Prepare(
          "INSERT INTO deliveries(event_id, sink, state, next_ms) VALUES(?1, ?2, 'pending', ?3)");
      if (!d.valid()) return Failed("deliveries");
      for (const std::string& sink : sinks)
        if (!d.Bind(1, event).Bind(2, sink).Bind(3, now_ms).Run()) return Failed("deliveries");
    }
  } catch (const json::exception& e) {
    return Status::Invalid(field + ": " + e.what());
  }
  return Status::Ok();
}

}  // namespace forewarden
