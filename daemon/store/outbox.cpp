#include "daemon/store/outbox.h"

#include "daemon/store/store.h"

namespace forewarden {

Status Outbox::Open(const std::string& data_dir) {
  if (!db_.Open(DatabasePath(data_dir)) || !db_.Exec("PRAGMA synchronous=NORMAL;"))
    return Status::StoreFailed("delivery: " + db_.error());
  Stmt id = db_.Prepare("SELECT value FROM meta WHERE key = 'install_id'");
  if (!id.valid() || !id.Step() || !id.Row())
    return Status::StoreFailed("delivery: no installation id in the store: " + db_.error());
  install_id_ = std::string(id.Text(0));
  db_.WaitForLocks(5000);
  pending_ = db_.Prepare(
      "SELECT d.event_id, d.attempts, d.next_ms, e.kind FROM deliveries d "
      "JOIN alert_events e ON e.id = d.event_id WHERE d.sink = ?1 AND d.state = 'pending' "
      "ORDER BY d.event_id LIMIT ?2");
  mark_delivered_ = db_.Prepare(
      "UPDATE deliveries SET state = 'delivered', attempts = attempts + 1, done_ms = ?3, "
      "last_error = NULL WHERE event_id = ?1 AND sink = ?2");
  mark_failed_ = db_.Prepare(
      "UPDATE deliveries SET state = ?3, attempts = ?4, next_ms = ?5, last_error = ?6 "
      "WHERE event_id = ?1 AND sink = ?2");
  next_due_ = db_.Prepare("SELECT min(next_ms) FROM deliveries WHERE state = 'pending'");
  backlog_ = db_.Prepare(
      "SELECT sum(d.state = 'pending'), sum(d.state = 'dead'), "
      "min(CASE WHEN d.state = 'pending' THEN e.at_ms END) FROM deliveries d "
      "JOIN alert_events e ON e.id = d.event_id WHERE d.state != 'delivered'");
  open_alerts_ =
      db_.Prepare("SELECT id FROM alerts WHERE state != 'resolved' AND group_id IS NULL");
  open_groups_ = db_.Prepare("SELECT id FROM alert_groups WHERE resolved_ms IS NULL");
  for (const Stmt* s : {&pending_, &mark_delivered_, &mark_failed_, &next_due_, &backlog_,
                        &open_alerts_, &open_groups_})
    if (!s->valid()) return Status::StoreFailed("delivery: " + db_.error());
  return Status::Ok();
}

Result<std::vector<PendingDelivery>> Outbox::Pending(const std::string& sink, long limit) {
  std::vector<PendingDelivery> out;
  pending_.Reset();
  pending_.Bind(1, sink).Bind(2, static_cast<std::int64_t>(limit));
  if (!pending_.Step()) return Status::StoreFailed(db_.error());
  for (; pending_.Row(); pending_.Step())
    out.push_back({pending_.Int(0), static_cast<int>(pending_.Int(1)), pending_.Int(2),
                   std::string(pending_.Text(3))});
  pending_.Reset();
  return out;
}

Status Outbox::Begin() {
  if (!db_.Exec("BEGIN IMMEDIATE;")) return Status::Busy("delivery: " + db_.error());
  return Status::Ok();
}

Status Outbox::Commit() {
  if (db_.Exec("COMMIT;")) return Status::Ok();
  const std::string why = db_.error();
  if (!db_.Exec("ROLLBACK;"))
    return Status::StoreFailed("delivery: commit: " + why + "; rollback: " + db_.error());
  return Status::StoreFailed("delivery: commit: " + why);
}

Status Outbox::Rollback() {
  if (db_.Exec("ROLLBACK;")) return Status::Ok();
  return Status::StoreFailed("delivery: rollback: " + db_.error());
}

Status Outbox::MarkDelivered(std::int64_t event, const std::string& sink, std::int64_t now_ms) {
  mark_delivered_.Reset();
  if (!mark_delivered_.Bind(1, event).Bind(2, sink).Bind(3, now_ms).Run())
    return Status::StoreFailed("delivery: " + db_.error());
  return Status::Ok();
}

Status Outbox::MarkFailed(std::int64_t event, const std::string& sink, bool dead, int attempts,
                          std::int64_t next_ms, const std::string& error) {
  mark_failed_.Reset();
  if (!mark_failed_.Bind(1, event)
           .Bind(2, sink)
           .Bind(3, std::string(dead ? "dead" : "pending"))
           .Bind(4, static_cast<std::int64_t>(attempts))
           .Bind(5, next_ms)
           .Bind(6, error.substr(0, 500))
           .Run())
    return Status::StoreFailed("delivery: " + db_.error());
  return Status::Ok();
}

std::optional<std::int64_t> Outbox::NextDue() {
  std::optional<std::int64_t> due;
  if (next_due_.Step() && next_due_.Row() && !next_due_.IsNull(0)) due = next_due_.Int(0);
  next_due_.Reset();
  return due;
}

OutboxBacklog Outbox::Backlog() {
  OutboxBacklog b;
  if (backlog_.Step() && backlog_.Row()) {
    b.pending = backlog_.IsNull(0) ? 0 : backlog_.Int(0);
    b.dead = backlog_.IsNull(1) ? 0 : backlog_.Int(1);
    b.oldest_pending_ms = backlog_.IsNull(2) ? 0 : backlog_.Int(2);
  }
  backlog_.Reset();
  return b;
}

namespace {

// The first column of every row of `q`.
std::vector<std::int64_t> Ids(Stmt& q) {
  std::vector<std::int64_t> ids;
  if (q.Step())
    for (; q.Row(); q.Step()) ids.push_back(q.Int(0));
  q.Reset();
  return ids;
}

}  // namespace

std::vector<std::int64_t> Outbox::OpenAlerts() {
  return Ids(open_alerts_);
}

std::vector<std::int64_t> Outbox::OpenGroups() {
  return Ids(open_groups_);
}

}  // namespace forewarden
