// The durable store: one SQLite database in WAL mode under the data folder. Holds every
// series with its monitor state and its checkpoint (the state before its oldest retained
// actual), the retained actuals, re-level adjustments, and an audit log. Schema changes are
// numbered migrations recorded in `meta.schema_version`.
// Owned by the engine thread; not thread-safe. Every fallible call returns false and leaves
// the reason in error().
#pragma once

#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include "daemon/store/sqlite.h"
#include "monitors/series.h"

namespace forewarden {

// The database file under a data folder (server.data): the one place its name is written.
std::string DatabasePath(const std::string& data_dir);

struct StoredSeries {
  std::int64_t id = 0;
  std::string key;
  std::string policy;
  std::string labels;  // JSON object text
  monitors::SeriesState state;
  std::int64_t retained = 0;       // actuals kept
  std::int64_t oldest_period = 0;  // oldest retained actual's period (when retained > 0)
  std::int64_t newest_period = 0;  // newest retained actual's period (when retained > 0)
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

class Store {
 public:
  // Opens or creates `dir`/forewarden.db, applies migrations, sets WAL and `synchronous`
  // (true = FULL, false = NORMAL) and, when max_bytes > 0, caps the database file (writes
  // beyond it fail with "database or disk is full", as on a full disk).
  bool Open(const std::string& dir, bool synchronous_full, long long max_bytes = 0,
            long long cache_bytes = 64LL << 20);
  const std::string& error() const { return db_.error(); }

  bool Begin();
  bool Commit();
  bool Rollback();
  bool Savepoint();
  bool ReleaseSavepoint();
  bool RollbackToSavepoint();

  bool CountSeries(std::int64_t& count);
  // Calls `each` for every series (in id order), with its retained-actual statistics.
  bool LoadSeries(const std::function<void(StoredSeries&&)>& each);

  // Creates a series; its id goes to `id`.
  bool InsertSeries(const std::string& key, const std::string& policy, const std::string& labels,
                    const monitors::SeriesState& state, std::int64_t& id);
  bool UpdateState(std::int64_t id, const monitors::SeriesState& state);
  bool UpdateCheckpoint(std::int64_t id, const monitors::SeriesState& checkpoint);
  bool LoadCheckpoint(std::int64_t id, monitors::SeriesState& checkpoint);

  // Inserts or replaces the actual of a period.
  bool PutActual(std::int64_t id, std::int64_t period, double value);
  // The oldest retained actual's period (`any` false when there is none).
  bool OldestActual(std::int64_t id, bool& any, std::int64_t& period);
  // The stored actual of a period, if any.
  bool GetActual(std::int64_t id, std::int64_t period, bool& found, double& value);
  // Retained actuals in period order, from `from` to `to` inclusive.
  bool Actuals(std::int64_t id, std::int64_t from, std::int64_t to, std::vector<StoredActual>& out);
  // Deletes actuals (and adjustments) with period < `before`.
  bool DropBefore(std::int64_t id, std::int64_t before);

  bool PutAdjustment(std::int64_t id, const Adjustment& a);
  bool Adjustments(std::int64_t id, std::vector<Adjustment>& out);

  bool Audit(std::int64_t at_unix_ms, const std::string& who, const std::string& action,
             const std::string& series_key, const std::string& detail);

  int schema_version() const { return schema_version_; }
  Db& db() { return db_; }  // the alert book shares the connection (and its transactions)

 private:
  bool Migrate();
  Db db_;
  int schema_version_ = 0;
  Stmt begin_, commit_, rollback_, savepoint_, release_, rollback_to_;
  Stmt insert_series_, insert_checkpoint_, update_state_, update_checkpoint_, load_checkpoint_;
  Stmt put_actual_, get_actual_, oldest_actual_, actuals_, drop_actuals_, drop_adjustments_;
  Stmt put_adjustment_, adjustments_, audit_;
};

}  // namespace forewarden
