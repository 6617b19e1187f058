#include "daemon/store/store.h"

#include <algorithm>
#include <filesystem>

#include "daemon/store/state_codec.h"

namespace forewarden {

std::string DatabasePath(const std::string& data_dir) {
  return (std::filesystem::path(data_dir) / "forewarden.db").string();
}
namespace {

// Each entry moves the schema from version i to i+1. Append only; never edit a shipped one.
const char* const kMigrations[] = {
    // 1: series, retained actuals, re-level adjustments, audit log
    "CREATE TABLE series("
    "  id INTEGER PRIMARY KEY,"
    "  key TEXT NOT NULL UNIQUE,"
    "  policy TEXT NOT NULL,"
    "  labels TEXT NOT NULL DEFAULT '{}',"
    "  state BLOB NOT NULL,"
    "  checkpoint BLOB NOT NULL);"
    "CREATE TABLE actuals("
    "  series_id INTEGER NOT NULL,"
    "  period INTEGER NOT NULL,"
    "  value REAL NOT NULL,"
    "  PRIMARY KEY(series_id, period)) WITHOUT ROWID;"
    "CREATE TABLE adjustments("
    "  series_id INTEGER NOT NULL,"
    "  period INTEGER NOT NULL,"
    "  level REAL NOT NULL,"
    "  seq INTEGER PRIMARY KEY AUTOINCREMENT);"
    "CREATE INDEX adjustments_series ON adjustments(series_id, period);"
    "CREATE TABLE audit("
    "  id INTEGER PRIMARY KEY,"
    "  at_ms INTEGER NOT NULL,"
    "  who TEXT NOT NULL,"
    "  action TEXT NOT NULL,"
    "  series_key TEXT NOT NULL,"
    "  detail TEXT NOT NULL);",
    // 2: checkpoints in their own table, so that scanning and updating states touches half
    //    the pages
    "CREATE TABLE checkpoints(series_id INTEGER PRIMARY KEY, state BLOB NOT NULL);"
    "INSERT INTO checkpoints(series_id, state) SELECT id, checkpoint FROM series;"
    "ALTER TABLE series DROP COLUMN checkpoint;",
    // 3: alerts (one row per episode), storm groups, their events (history and outbox) and
    //    per-sink deliveries; an installation id for idempotency keys
    "CREATE TABLE alert_groups("
    "  id INTEGER PRIMARY KEY,"
    "  policy TEXT NOT NULL,"
    "  rule TEXT NOT NULL,"
    "  severity TEXT NOT NULL,"
    "  members INTEGER NOT NULL,"
    "  open_members INTEGER NOT NULL,"
    "  opened_ms INTEGER NOT NULL,"
    "  resolved_ms INTEGER);"
    "CREATE TABLE alerts("
    "  id INTEGER PRIMARY KEY,"
    "  series_id INTEGER NOT NULL,"
    "  series_key TEXT NOT NULL,"
    "  policy TEXT NOT NULL,"
    "  rule TEXT NOT NULL,"
    "  signal TEXT NOT NULL,"
    "  severity TEXT NOT NULL,"
    "  state TEXT NOT NULL,"
    "  opened_period TEXT NOT NULL,"
    "  opened_ms INTEGER NOT NULL,"
    "  updated_ms INTEGER NOT NULL,"
    "  value REAL,"
    "  limit_value REAL,"
    "  ack_by TEXT,"
    "  note TEXT,"
    "  snooze_until_period TEXT,"
    "  snooze_until_ms INTEGER,"
    "  resolved_period TEXT,"
    "  resolved_ms INTEGER,"
    "  resolved_by TEXT,"
    "  resolved_reason TEXT,"
    "  group_id INTEGER);"
    // lean indexes: alert changes ride in the ingest transactions
    "CREATE INDEX alerts_unresolved ON alerts(state) WHERE state != 'resolved';"
    "CREATE INDEX alerts_series ON alerts(series_id);"
    "CREATE TABLE alert_events("
    "  id INTEGER PRIMARY KEY,"
    "  alert_id INTEGER,"
    "  group_id INTEGER,"
    "  kind TEXT NOT NULL,"
    "  at_ms INTEGER NOT NULL,"
    "  actor TEXT,"
    "  note TEXT,"
    "  severity TEXT,"
    "  value REAL,"
    "  detail TEXT);"
    "CREATE INDEX alert_events_alert ON alert_events(alert_id, id);"
    "CREATE TABLE deliveries("
    "  event_id INTEGER NOT NULL,"
    "  sink TEXT NOT NULL,"
    "  state TEXT NOT NULL,"
    "  attempts INTEGER NOT NULL DEFAULT 0,"
    "  next_ms INTEGER NOT NULL,"
    "  last_error TEXT,"
    "  done_ms INTEGER,"
    "  PRIMARY KEY(event_id, sink)) WITHOUT ROWID;"
    "CREATE INDEX deliveries_due ON deliveries(state, next_ms);"
    "INSERT OR IGNORE INTO meta(key, value) VALUES('install_id', lower(hex(randomblob(8))));",
    // 4: the resets of one series, newest first, for its detail (GET /v1/series/{key})
    "CREATE INDEX audit_series ON audit(series_key, id);",
    // 5: the diagnosis made when an alert opened (JSON; null for storm members and old alerts),
    //    so that notifications carry it without asking the engine
    "ALTER TABLE alerts ADD COLUMN diagnosis TEXT;",
    // 6: where each Kafka topic partition stands, committed with the actuals it carried
    "CREATE TABLE source_offsets("
    "  topic TEXT NOT NULL,"
    "  partition INTEGER NOT NULL,"
    "  next_offset INTEGER NOT NULL,"
    "  PRIMARY KEY(topic, partition)) WITHOUT ROWID;",
    // 7: instances sharing series through Kafka (daemon/feeds/changelog.h): each series' source
    //    partition, its number within the partition and the alert episodes it has opened (the
    //    parts of its alerts' ids), and each partition's next series number
    "ALTER TABLE series ADD COLUMN part INTEGER NOT NULL DEFAULT -1;"
    "ALTER TABLE series ADD COLUMN ordinal INTEGER NOT NULL DEFAULT 0;"
    "ALTER TABLE series ADD COLUMN episodes INTEGER NOT NULL DEFAULT 0;"
    "CREATE INDEX series_part ON series(part) WHERE part >= 0;"
    "CREATE TABLE partitions(part INTEGER PRIMARY KEY, next_ordinal INTEGER NOT NULL);",
};
constexpr int kSchemaVersion = static_cast<int>(sizeof kMigrations / sizeof kMigrations[0]);

}  // namespace

Status Store::Failed(const std::string& what) const {
  return Status::StoreFailed("store: " + what + ": " + db_.error());
}

Status Store::Open(const std::string& dir, bool synchronous_full, long long max_bytes,
                   long long cache_bytes) {
  std::error_code ec;
  std::filesystem::create_directories(dir, ec);
  if (ec) return Status::StoreFailed("store: create data folder " + dir + ": " + ec.message());
  if (!db_.Open(DatabasePath(dir))) return Failed("open");
  if (!db_.Exec("PRAGMA journal_mode=WAL;") ||
      !db_.Exec(std::string("PRAGMA synchronous=") + (synchronous_full ? "FULL" : "NORMAL") +
                ";") ||
      !db_.Exec("PRAGMA foreign_keys=ON;"))
    return Failed("open");
  db_.WaitForLocks(5000);
  if (!Migrate()) return Failed("migrate");
  if (!db_.Exec("PRAGMA cache_size=-" + std::to_string(std::max(1LL, cache_bytes / 1024)) + ";"))
    return Failed("open");
  if (max_bytes > 0) {
    Stmt size = db_.Prepare("PRAGMA page_size");
    if (!size.valid() || !size.Step() || !size.Row()) return Failed("open");
    const long long page = size.Int(0);
    size.Reset();
    if (!db_.Exec("PRAGMA max_page_count=" + std::to_string(std::max(1LL, max_bytes / page)) + ";"))
      return Failed("open");
  }
  begin_ = db_.Prepare("BEGIN IMMEDIATE");
  commit_ = db_.Prepare("COMMIT");
  rollback_ = db_.Prepare("ROLLBACK");
  savepoint_ = db_.Prepare("SAVEPOINT batch");
  release_ = db_.Prepare("RELEASE batch");
  rollback_to_ = db_.Prepare("ROLLBACK TO batch");
  insert_series_ = db_.Prepare(
      "INSERT INTO series(key, policy, labels, state, part, ordinal) "
      "VALUES(?1, ?2, ?3, ?4, ?5, ?6)");
  set_episodes_ = db_.Prepare("UPDATE series SET episodes = ?2 WHERE id = ?1");
  put_next_ordinal_ =
      db_.Prepare("INSERT OR REPLACE INTO partitions(part, next_ordinal) VALUES(?1, ?2)");
  insert_checkpoint_ = db_.Prepare("INSERT INTO checkpoints(series_id, state) VALUES(?1, ?2)");
  update_state_ = db_.Prepare("UPDATE series SET state = ?2 WHERE id = ?1");
  update_checkpoint_ = db_.Prepare("UPDATE checkpoints SET state = ?2 WHERE series_id = ?1");
  load_checkpoint_ = db_.Prepare("SELECT state FROM checkpoints WHERE series_id = ?1");
  put_actual_ =
      db_.Prepare("INSERT OR REPLACE INTO actuals(series_id, period, value) VALUES(?1, ?2, ?3)");
  get_actual_ = db_.Prepare("SELECT value FROM actuals WHERE series_id = ?1 AND period = ?2");
  oldest_actual_ = db_.Prepare("SELECT min(period) FROM actuals WHERE series_id = ?1");
  actuals_ = db_.Prepare(
      "SELECT period, value FROM actuals WHERE series_id = ?1 AND period BETWEEN ?2 AND ?3 "
      "ORDER BY period");
  drop_actuals_ = db_.Prepare("DELETE FROM actuals WHERE series_id = ?1 AND period < ?2");
  drop_adjustments_ = db_.Prepare("DELETE FROM adjustments WHERE series_id = ?1 AND period < ?2");
  put_adjustment_ =
      db_.Prepare("INSERT INTO adjustments(series_id, period, level) VALUES(?1, ?2, ?3)");
  adjustments_ = db_.Prepare(
      "SELECT period, level FROM adjustments WHERE series_id = ?1 ORDER BY period, seq");
  audit_ = db_.Prepare(
      "INSERT INTO audit(at_ms, who, action, series_key, detail) VALUES(?1, ?2, ?3, ?4, ?5)");
  put_offset_ = db_.Prepare(
      "INSERT OR REPLACE INTO source_offsets(topic, partition, next_offset) VALUES(?1, ?2, ?3)");
  offsets_ = db_.Prepare("SELECT topic, partition, next_offset FROM source_offsets");
  for (const Stmt* s : {&begin_,
                        &commit_,
                        &rollback_,
                        &savepoint_,
                        &release_,
                        &rollback_to_,
                        &insert_series_,
                        &insert_checkpoint_,
                        &set_episodes_,
                        &put_next_ordinal_,
                        &update_state_,
                        &update_checkpoint_,
                        &load_checkpoint_,
                        &put_actual_,
                        &get_actual_,
                        &oldest_actual_,
                        &actuals_,
                        &drop_actuals_,
                        &drop_adjustments_,
                        &put_adjustment_,
                        &adjustments_,
                        &audit_})
    if (!s->valid()) return Failed("prepare");
  return Status::Ok();
}

bool Store::Migrate() {
  if (!db_.Exec("CREATE TABLE IF NOT EXISTS meta(key TEXT PRIMARY KEY, value TEXT NOT NULL);"))
    return false;
  Stmt get = db_.Prepare("SELECT value FROM meta WHERE key = 'schema_version'");
  if (!get.valid() || !get.Step()) return false;
  int version = get.Row() ? std::stoi(std::string(get.Text(0))) : 0;
  get.Reset();
  if (version > kSchemaVersion)
    return db_.Fail("the database has schema version " + std::to_string(version) +
                    ", newer than this forewarden knows (" + std::to_string(kSchemaVersion) + ")");
  for (; version < kSchemaVersion; ++version) {
    if (!db_.Exec("BEGIN IMMEDIATE;")) return false;
    if (!db_.Exec(kMigrations[version]) ||
        !db_.Exec("INSERT OR REPLACE INTO meta(key, value) VALUES('schema_version', '" +
                  std::to_string(version + 1) + "');") ||
        !db_.Exec("COMMIT;")) {
      db_.Exec("ROLLBACK;");
      return false;
    }
  }
  schema_version_ = version;
  return true;
}

Status Store::Begin() {
  return Check(begin_.Run(), "begin");
}
Status Store::Commit() {
  return Check(commit_.Run(), "commit");
}
void Store::Rollback() {
  rollback_.Run();  // a failed rollback: the transaction ends when the connection closes
}
Status Store::Savepoint() {
  return Check(savepoint_.Run(), "savepoint");
}
Status Store::ReleaseSavepoint() {
  return Check(release_.Run(), "release");
}
Status Store::RollbackToSavepoint() {
  return Check(rollback_to_.Run() && release_.Run(), "rollback to savepoint");
}

Result<std::int64_t> Store::CountSeries() {
  Stmt q = db_.Prepare("SELECT count(*) FROM series");
  if (!q.valid() || !q.Step() || !q.Row()) return Failed("count series");
  const std::int64_t count = q.Int(0);
  q.Reset();
  return count;
}

Status Store::LoadSeries(const std::function<void(StoredSeries&&)>& each) {
  // Two ordered scans merged by id: much faster than per-series subqueries for millions.
  Stmt q = db_.Prepare(
      "SELECT id, key, policy, labels, state, part, ordinal, episodes FROM series ORDER BY id");
  Stmt a = db_.Prepare(
      "SELECT series_id, count(*), min(period), max(period) FROM actuals GROUP BY series_id "
      "ORDER BY series_id");
  if (!q.valid() || !a.valid() || !a.Step()) return Failed("load series");
  for (;;) {
    if (!q.Step()) return Failed("load series");
    if (!q.Row()) {
      a.Reset();
      return Status::Ok();
    }
    StoredSeries s;
    s.id = q.Int(0);
    s.key = std::string(q.Text(1));
    s.policy = std::string(q.Text(2));
    s.labels = std::string(q.Text(3));
    if (!DecodeState(q.Blob(4), s.state)) {
      q.Reset();
      a.Reset();
      return Status::StoreFailed("store: series '" + s.key + "': the stored state cannot be read");
    }
    s.place.part = static_cast<std::int32_t>(q.Int(5));
    s.place.ordinal = static_cast<std::int32_t>(q.Int(6));
    s.place.episodes = static_cast<std::int32_t>(q.Int(7));
    while (a.Row() && a.Int(0) < s.id)
      if (!a.Step()) return Failed("load series");
    if (a.Row() && a.Int(0) == s.id) {
      s.retained = a.Int(1);
      s.oldest_period = a.Int(2);
      s.newest_period = a.Int(3);
    }
    each(std::move(s));
  }
}

Result<std::int64_t> Store::InsertSeries(const std::string& key, const std::string& policy,
                                         const std::string& labels,
                                         const monitors::SeriesState& state, SeriesPlace place) {
  const std::string blob = EncodeState(state);
  if (!insert_series_.Bind(1, key)
           .Bind(2, policy)
           .Bind(3, labels)
           .BindBlob(4, blob)
           .Bind(5, static_cast<std::int64_t>(place.part))
           .Bind(6, static_cast<std::int64_t>(place.ordinal))
           .Run())
    return Failed("insert series");
  const std::int64_t id = db_.LastInsertId();
  if (place.part >= 0 && !put_next_ordinal_.Bind(1, static_cast<std::int64_t>(place.part))
                              .Bind(2, static_cast<std::int64_t>(place.ordinal) + 1)
                              .Run())
    return Failed("insert series");
  if (!insert_checkpoint_.Bind(1, id).BindBlob(2, blob).Run()) return Failed("insert checkpoint");
  return id;
}

Status Store::UpdateState(std::int64_t id, const monitors::SeriesState& state) {
  const std::string blob = EncodeState(state);
  return Check(update_state_.Bind(1, id).BindBlob(2, blob).Run(), "update state");
}

Result<std::string> Store::InstallId() {
  Stmt q = db_.Prepare("SELECT value FROM meta WHERE key = 'install_id'");
  if (!q.valid() || !q.Step() || !q.Row()) return Failed("installation id");
  std::string id(q.Text(0));
  q.Reset();
  return id;
}

Status Store::SetEpisodes(std::int64_t id, std::int32_t episodes) {
  return Check(set_episodes_.Bind(1, id).Bind(2, static_cast<std::int64_t>(episodes)).Run(),
               "count alert episodes");
}

Result<std::int32_t> Store::NextOrdinal(std::int32_t part) {
  Stmt q = db_.Prepare("SELECT next_ordinal FROM partitions WHERE part = ?1");
  if (!q.valid()) return Failed("next series number");
  q.Bind(1, static_cast<std::int64_t>(part));
  if (!q.Step()) return Failed("next series number");
  const std::int32_t next = q.Row() ? static_cast<std::int32_t>(q.Int(0)) : 0;
  q.Reset();
  return next;
}

Status Store::UpdateCheckpoint(std::int64_t id, const monitors::SeriesState& checkpoint) {
  const std::string blob = EncodeState(checkpoint);
  return Check(update_checkpoint_.Bind(1, id).BindBlob(2, blob).Run(), "update checkpoint");
}

Status Store::LoadCheckpoint(std::int64_t id, monitors::SeriesState& checkpoint) {
  load_checkpoint_.Bind(1, id);
  if (!load_checkpoint_.Step()) return Failed("load checkpoint");
  if (!load_checkpoint_.Row())
    return Status::StoreFailed("store: series " + std::to_string(id) + " has no checkpoint");
  const bool ok = DecodeState(load_checkpoint_.Blob(0), checkpoint);
  load_checkpoint_.Reset();
  if (!ok)
    return Status::StoreFailed("store: series " + std::to_string(id) +
                               ": the checkpoint cannot be read");
  return Status::Ok();
}

Status Store::PutActual(std::int64_t id, std::int64_t period, double value) {
  return Check(put_actual_.Bind(1, id).Bind(2, period).Bind(3, value).Run(), "put actual");
}

Result<std::optional<std::int64_t>> Store::OldestActual(std::int64_t id) {
  oldest_actual_.Bind(1, id);
  if (!oldest_actual_.Step()) return Failed("oldest actual");
  std::optional<std::int64_t> period;
  if (oldest_actual_.Row() && !oldest_actual_.IsNull(0)) period = oldest_actual_.Int(0);
  oldest_actual_.Reset();
  return period;
}

Result<std::optional<double>> Store::GetActual(std::int64_t id, std::int64_t period) {
  get_actual_.Bind(1, id).Bind(2, period);
  if (!get_actual_.Step()) return Failed("get actual");
  std::optional<double> value;
  if (get_actual_.Row()) value = get_actual_.Double(0);
  get_actual_.Reset();
  return value;
}

Status Store::Actuals(std::int64_t id, std::int64_t from, std::int64_t to,
                      std::vector<StoredActual>& out) {
  out.clear();
  actuals_.Bind(1, id).Bind(2, from).Bind(3, to);
  for (;;) {
    if (!actuals_.Step()) return Failed("read actuals");
    if (!actuals_.Row()) return Status::Ok();
    out.push_back({actuals_.Int(0), actuals_.Double(1)});
  }
}

Status Store::DropBefore(std::int64_t id, std::int64_t before) {
  return Check(drop_actuals_.Bind(1, id).Bind(2, before).Run() &&
                   drop_adjustments_.Bind(1, id).Bind(2, before).Run(),
               "trim");
}

Status Store::PutAdjustment(std::int64_t id, const Adjustment& a) {
  return Check(put_adjustment_.Bind(1, id).Bind(2, a.period).Bind(3, a.level).Run(),
               "put adjustment");
}

Status Store::PutOffsets(const std::vector<SourceOffset>& offsets) {
  for (const SourceOffset& o : offsets)
    if (!put_offset_.Bind(1, o.topic)
             .Bind(2, static_cast<std::int64_t>(o.partition))
             .Bind(3, o.next)
             .Run())
      return Failed("put source offset");
  return Status::Ok();
}

Status Store::Offsets(std::vector<SourceOffset>& out) {
  out.clear();
  for (;;) {
    if (!offsets_.Step()) return Failed("read source offsets");
    if (!offsets_.Row()) return Status::Ok();
    out.push_back({std::string(offsets_.Text(0)), static_cast<std::int32_t>(offsets_.Int(1)),
                   offsets_.Int(2)});
  }
}

Status Store::Adjustments(std::int64_t id, std::vector<Adjustment>& out) {
  out.clear();
  adjustments_.Bind(1, id);
  for (;;) {
    if (!adjustments_.Step()) return Failed("read adjustments");
    if (!adjustments_.Row()) return Status::Ok();
    out.push_back({adjustments_.Int(0), adjustments_.Double(1)});
  }
}

Status Store::Audit(std::int64_t at_unix_ms, const std::string& who, const std::string& action,
                    const std::string& series_key, const std::string& detail) {
  return Check(audit_.Bind(1, at_unix_ms)
                   .Bind(2, who)
                   .Bind(3, action)
                   .Bind(4, series_key)
                   .Bind(5, detail)
                   .Run(),
               "audit");
}

}  // namespace forewarden
