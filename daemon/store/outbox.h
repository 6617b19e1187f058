// The delivery worker's side of the outbox: its own connection to the store's database, the
// pending deliveries of a sink in event order, marking them delivered or failed, the backlog
// and the unresolved alerts and groups that Alertmanager needs re-sent. The rows are written by
// the alert book inside the engine's transactions; this reads and updates them.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "daemon/common/status.h"
#include "daemon/store/sqlite.h"

namespace forewarden {

struct PendingDelivery {
  std::int64_t event = 0;
  int attempts = 0;
  std::int64_t next_ms = 0;  // not before
  std::string kind;
};

struct OutboxBacklog {
  long pending = 0;
  long dead = 0;
  std::int64_t oldest_pending_ms = 0;  // 0 when none
};

class Outbox {
 public:
  // Opens the database under `data_dir` (synchronous NORMAL: a delivery marked just before a
  // power cut may be sent again; delivery is at least once anyway).
  Status Open(const std::string& data_dir);
  const std::string& install_id() const { return install_id_; }
  Db& db() { return db_; }  // for Notifications, on this connection

  // The oldest `limit` pending deliveries of `sink`, in event order.
  Result<std::vector<PendingDelivery>> Pending(const std::string& sink, long limit);
  // A round's changes in one write transaction; busy when the engine holds the lock now.
  Status Begin();
  Status Commit();  // rolls back when the commit fails
  Status Rollback();
  Status MarkDelivered(std::int64_t event, const std::string& sink, std::int64_t now_ms);
  Status MarkFailed(std::int64_t event, const std::string& sink, bool dead, int attempts,
                    std::int64_t next_ms, const std::string& error);
  // When the next pending delivery is due (none: nullopt).
  std::optional<std::int64_t> NextDue();
  OutboxBacklog Backlog();
  // Unresolved alerts outside a group, and unresolved groups (for Alertmanager's re-sends).
  std::vector<std::int64_t> OpenAlerts();
  std::vector<std::int64_t> OpenGroups();

 private:
  Db db_;
  std::string install_id_;
  Stmt pending_, mark_delivered_, mark_failed_, next_due_, backlog_, open_alerts_, open_groups_;
};

}  // namespace forewarden
