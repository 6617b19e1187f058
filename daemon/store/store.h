// The durable store: one SQLite database in WAL mode under the data folder. Holds every
// series with its monitor state and its checkpoint (the state before its oldest retained
// actual), the retained actuals, re-level adjustments, and an audit log. Schema changes are
// numbered migrations recorded in `meta.schema_version`.
// Owned by the engine thread; not thread-safe. Every fallible call returns a Status (kind store
// failed, the message naming what failed and SQLite's reason) or a Result.
#pragma once

#include <cstdint>
#include <functional>
#include <optional>
#include <string>
#include <vector>

#include "daemon/common/status.h"
#include "daemon/store/sqlite.h"
#include "monitors/series.h"

namespace forewarden {

// The database file under a data folder (server.data): the one place its name is written.
std::string DatabasePath(const std::string& data_dir);

// Where a series stands among instances sharing series through Kafka: its source partition
// (-1: none, a single instance), its number within that partition (in order of first arrival)
// and the alert episodes it has opened; the last two make its alerts' ids (changelog.h).
struct SeriesPlace {
  std::int32_t part = -1;
  std::int32_t ordinal = 0;
  std::int32_t episodes = 0;
};

struct StoredSeries {
  std::int64_t id = 0;
  std::string key;
  std::string policy;
  std::string labels;  // JSON object text
  monitors::SeriesState state;
  std::int64_t retained = 0;       // actuals kept
  std::int64_t oldest_period = 0;  // oldest retained actual's period (when retained > 0)
  std::int64_t newest_period = 0;  // newest retained actual's period (when retained > 0)
  SeriesPlace place;
};

struct StoredActual {
  std::int64_t period = 0;
  double value = 0.0;
};

// A re-level: after the actual of `period`, the level was set to `level` (E and C cleared).
struct Adjustment {
  std::int64_t period = 0;
  double level = 0.0;
};

// Where a source of actuals stands: the next offset to read of one Kafka topic partition,
// written in the same transaction as the actuals read before it.
struct SourceOffset {
  std::string topic;
  std::int32_t partition = 0;
  std::int64_t next = 0;
};

class Store {
 public:
  // Opens or creates `dir`/forewarden.db, applies migrations, sets WAL and `synchronous`
  // (true = FULL, false = NORMAL) and, when max_bytes > 0, caps the database file (writes
  // beyond it fail with "database or disk is full", as on a full disk).
  Status Open(const std::string& dir, bool synchronous_full, long long max_bytes = 0,
              long long cache_bytes = 64LL << 20);

  Status Begin();
  Status Commit();
  // Ends the open transaction without its changes. Nothing to answer: a rollback that fails
  // leaves SQLite to roll back when the connection closes.
  void Rollback();
  Status Savepoint();
  Status ReleaseSavepoint();
  Status RollbackToSavepoint();

  Result<std::int64_t> CountSeries();
  // Calls `each` for every series (in id order), with its retained-actual statistics.
  Status LoadSeries(const std::function<void(StoredSeries&&)>& each);

  // Creates a series; its id. With a partition, that partition's next series number moves past
  // the series' own.
  Result<std::int64_t> InsertSeries(const std::string& key, const std::string& policy,
                                    const std::string& labels, const monitors::SeriesState& state,
                                    SeriesPlace place = {});
  Status SetEpisodes(std::int64_t id, std::int32_t episodes);
  // The number the next new series of partition `part` gets (0 for a partition never seen).
  Result<std::int32_t> NextOrdinal(std::int32_t part);
  Status UpdateState(std::int64_t id, const monitors::SeriesState& state);
  Status UpdateCheckpoint(std::int64_t id, const monitors::SeriesState& checkpoint);
  Status LoadCheckpoint(std::int64_t id, monitors::SeriesState& checkpoint);

  // Inserts or replaces the actual of a period.
  Status PutActual(std::int64_t id, std::int64_t period, double value);
  // The oldest retained actual's period (nullopt when there is none).
  Result<std::optional<std::int64_t>> OldestActual(std::int64_t id);
  // The stored actual of a period, if any.
  Result<std::optional<double>> GetActual(std::int64_t id, std::int64_t period);
  // Retained actuals in period order, from `from` to `to` inclusive.
  Status Actuals(std::int64_t id, std::int64_t from, std::int64_t to,
                 std::vector<StoredActual>& out);
  // Deletes actuals (and adjustments) with period < `before`.
  Status DropBefore(std::int64_t id, std::int64_t before);

  Status PutAdjustment(std::int64_t id, const Adjustment& a);
  Status Adjustments(std::int64_t id, std::vector<Adjustment>& out);

  // Inside the caller's transaction: records where each source partition stands.
  Status PutOffsets(const std::vector<SourceOffset>& offsets);
  Status Offsets(std::vector<SourceOffset>& out);

  Status Audit(std::int64_t at_unix_ms, const std::string& who, const std::string& action,
               const std::string& series_key, const std::string& detail);

  // The installation id: random, made with the database (notifications' idempotency keys).
  Result<std::string> InstallId();
  int schema_version() const { return schema_version_; }
  Db& db() { return db_; }  // the alert book shares the connection (and its transactions)

 private:
  bool Migrate();
  // A store failure naming `what`, with SQLite's last reason.
  Status Failed(const std::string& what) const;
  Status Check(bool ok, const char* what) const { return ok ? Status::Ok() : Failed(what); }
  Db db_;
  int schema_version_ = 0;
  Stmt begin_, commit_, rollback_, savepoint_, release_, rollback_to_;
  Stmt insert_series_, insert_checkpoint_, set_episodes_, put_next_ordinal_, update_state_,
      update_checkpoint_, load_checkpoint_;
  Stmt put_actual_, get_actual_, oldest_actual_, actuals_, drop_actuals_, drop_adjustments_;
  Stmt put_adjustment_, adjustments_, audit_, put_offset_, offsets_;
};

}  // namespace forewarden
