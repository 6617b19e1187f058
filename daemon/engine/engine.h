// The engine: one thread owns every series' state and the store. Other threads hand it
// batches of actuals (Submit) and read jobs (Post); it applies each batch all or nothing
// inside one SQLite transaction shared by the batches waiting together (group commit), and
// only after the commit does it call the batch's reply. A failure of the store is sticky:
// the reason is kept, every later batch is refused with it, and readiness reports it.
//
// Per-series semantics of an actual (README, "How actuals are applied"):
//   * a period after the series' last: a normal update (gap periods follow the policy's rule);
//   * the same period with the same value: unchanged;
//   * the same or an earlier period with another value, or a period that was filled or skipped:
//     a restatement; the series is recomputed from its checkpoint over the retained actuals;
//   * a period older than the retained history: a problem, nothing applied.
#pragma once

#include <atomic>
#include <condition_variable>
#include <cstdint>
#include <deque>
#include <functional>
#include <memory>
#include <mutex>
#include <optional>
#include <string>
#include <string_view>
#include <thread>
#include <unordered_map>
#include <unordered_set>
#include <utility>
#include <vector>

#include "config/settings.h"
#include "daemon/batch/rows.h"
#include "daemon/common/chunked_vector.h"
#include "daemon/common/key_arena.h"
#include "daemon/engine/read_view.h"
#include "daemon/engine/series_index.h"
#include "daemon/store/alert_book.h"
#include "daemon/store/handover.h"
#include "daemon/store/store.h"
#include "monitors/diagnosis.h"

namespace forewarden {

struct IngestCounts {
  long rows = 0;
  long applied = 0;
  long unchanged = 0;
  long restated = 0;
  long filled = 0;  // gap periods filled with zero or skipped
  long new_series = 0;
  long alerts_opened = 0;    // alert episodes opened
  long alerts_resolved = 0;  // alert episodes resolved
};

struct IngestReply {
  enum class Status { kOk, kRejected, kUnavailable };
  Status status = Status::kOk;
  IngestCounts counts;
  std::vector<RowProblem> problems;  // kRejected: the first 100
  long problem_count = 0;
  std::string error;  // kUnavailable: why
};

// One series as the read API sees it.
struct SeriesView {
  std::string_view key;
  std::string_view policy;  // the policy's name (lives as long as the settings in force)
  std::string_view labels;  // JSON object text
  const monitors::SeriesState* state = nullptr;
  const config::Policy* spec = nullptr;
  bool stale = false;
  std::size_t index = 0;  // the engine's index (the alert book's series index)
};

// One retained period of a series, recomputed with the engine's own step.
struct HistoryRow {
  std::int64_t period = 0;
  double actual = 0.0;
  bool observed = true;  // false: filled by the gap rule
  monitors::StepResult result;
};

// A series' status as the API lists it and /metrics counts it: alerting (a rule holds) before
// stale (actuals overdue) before warming (start window or warm-up) before ok.
enum class SeriesStatus { kOk = 0, kAlerting = 1, kStale = 2, kWarming = 3 };
inline bool Warming(const monitors::SeriesState& s, const config::Policy& p) {
  return !s.started || s.forecasts <= p.spec.warmup;
}
inline SeriesStatus StatusOf(const monitors::SeriesState& s, const config::Policy& p, bool stale) {
  if (s.active) return SeriesStatus::kAlerting;
  if (stale) return SeriesStatus::kStale;
  return Warming(s, p) ? SeriesStatus::kWarming : SeriesStatus::kOk;
}
// The same status for row `i` of a read view, at the view's day.
inline SeriesStatus StatusOf(const ReadView& view, std::size_t i) {
  const ReadRow& r = view.rows[i];
  if (r.flags & ReadRow::kActive) return SeriesStatus::kAlerting;
  if (view.stale(i)) return SeriesStatus::kStale;
  return r.flags & ReadRow::kWarming ? SeriesStatus::kWarming : SeriesStatus::kOk;
}
inline const char* StatusName(SeriesStatus s) {
  static const char* kNames[] = {"ok", "alerting", "stale", "warming"};
  return kNames[static_cast<int>(s)];
}

// What /metrics shows of the portfolio (engine thread, one pass over the series).
struct PolicyHealth {
  std::string policy;
  long series[4] = {0, 0, 0, 0};  // by SeriesStatus
  // series with |signal| <= bound, for each bound (cumulative; the last bound is +Inf)
  std::vector<long> trigg_at_most, cusum_at_most;
  std::int64_t last_actual_ms = 0;  // 0: none since start
  bool has_bias = false;
  double bias = 0.0;  // sum of errors / sum of actuals over the policy's newest period
  // the opted-in series with the largest |Trigg's signal|: key, trigg, cusum
  struct Top {
    std::string key;
    double trigg = 0, cusum = 0;
  };
  std::vector<Top> top;
};
struct AlertTally {
  std::string policy, rule, severity, state;
  long count = 0;
};
struct EngineSnapshot {
  std::vector<PolicyHealth> policies;
  std::vector<AlertTally> alerts;  // unresolved alerts by policy, rule, severity and state
  long queue_capacity = 0;         // server.queue_depth in force
};
inline constexpr double kTriggBounds[] = {0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0};
inline constexpr double kCusumBounds[] = {1, 2, 3, 4, 5, 6, 8, 10, 15, 20, 50};

// Engine totals since start (thread-safe reads).
struct EngineCounters {
  std::atomic<long> applied{0}, unchanged{0}, restated{0}, rejected_rows{0};
  std::atomic<long> series_refused{0};  // rows of new series refused at server.max_series
  std::atomic<long> batches_ok{0}, batches_rejected{0}, batches_unavailable{0};
  std::atomic<long> alerts_opened{0}, alerts_escalated{0}, alerts_resolved{0}, alerts_grouped{0};
};

// Fills what the pass over every series adds to `out` (statuses, signal histograms, the
// opted-in top series) from `view`; `out` and `view` taken in the same engine job.
struct ReadView;
void AddSeriesHealth(const ReadView& view, EngineSnapshot& out);

// One record for the changelog of instances sharing series (daemon/feeds/changelog.h).
struct ChangeRecord {
  std::int32_t partition = 0;
  std::string key;           // a series key, or kPositionKey
  std::string value;         // JSON text
  std::int64_t through = 0;  // series records: the partition's next offset at the commit
};
// Sharing series: partitions 0-1022, 2^27 series a partition, 65,536 alert episodes a series;
// alert id = (partition + 1) * 2^43 + number * 2^16 + episode, below 2^53 (exact in JSON).
inline constexpr std::int32_t kMaxSharedPartition = 1022;
inline constexpr std::int32_t kMaxSharedOrdinal = 1 << 27;
// The key of a partition's position record: never a series key (keys hold no control
// characters).
inline const std::string kPositionKey = std::string("\x01position", 9);

class Engine {
 public:
  using Clock = std::function<std::int64_t()>;  // milliseconds since the Unix epoch

  Engine(std::shared_ptr<const config::Settings> settings, Clock clock);
  ~Engine();

  // Opens the store under the data folder, loads every series, starts the thread. Store failed,
  // invalid (a stored series no longer fits its policy) or conflict (stored actuals that do not
  // replay).
  Status Start();
  // Finishes every queued job, then stops the thread. Idempotent.
  void Stop();

  // Thread-safe. Queues a batch; false (and no call of `done`) when the queue is full.
  // `done` runs on the engine thread after the commit (or the rejection).
  bool Submit(std::vector<IngestRow> rows, std::function<void(IngestReply)> done);
  // Submit for a source that resumes from the store: `offsets` are written in the same
  // transaction as the rows, only when the batch is applied (a rejected batch writes neither).
  // A batch of no rows and some offsets just moves the offsets on.
  bool Submit(std::vector<IngestRow> rows, std::vector<SourceOffset> offsets,
              std::function<void(IngestReply)> done);
  // On the engine thread (from Post): where each source partition stands in the store.
  Status StoredOffsets(std::vector<SourceOffset>& out) { return store_.Offsets(out); }
  // Thread-safe. Runs `job` on the engine thread, between batches; false when the queue is full.
  bool Post(std::function<void()> job);
  // Thread-safe. Replaces the settings (already validated) between batches.
  bool Reload(std::shared_ptr<const config::Settings> settings);

  // Thread-safe: the sticky failure ("" when healthy), queue depth.
  std::string failure() const;
  std::size_t queue_depth() const;

  // ---- Engine thread only (inside Post jobs) ----
  const config::Settings& settings() const { return *settings_; }
  std::size_t series_count() const { return series_.size(); }
  // Every series, in creation order (ascending SeriesView::index).
  void ForEachSeries(const std::function<void(const SeriesView&)>& each) const;
  // Only the series that hold a rule now (an index kept with each batch and housekeeping, so
  // an alerting list costs the alerting series, not all of them). Any order.
  void ForEachAlertingSeries(const std::function<void(const SeriesView&)>& each) const;
  std::optional<SeriesView> FindSeries(const std::string& key) const;
  // The series at `index` (from a read view); nullopt beyond the series held.
  std::optional<SeriesView> SeriesAt(std::size_t index) const;
  // The read view as of now (read_view.h): the last one again when nothing changed since,
  // else a new one (a copy of 20 bytes a series, plus the rows of series that changed).
  std::shared_ptr<const ReadView> ReadSnapshot();
  // Recomputed retained history of a series within [from, to].
  bool History(const std::string& key, std::int64_t from, std::int64_t to,
               std::vector<HistoryRow>& rows, std::string& error);
  // The diagnosis of an alert of series `key` that opened in period `opened`, from its
  // recomputed retained history, as replay --alerts makes it (monitors::DiagnoseAlert). Not
  // found without the series; store failed when the history cannot be recomputed.
  Result<monitors::AlertDiagnosis> DiagnoseAlert(const std::string& key, std::int64_t opened);
  // Re-levels a series; `how` is "value", "last" or "mean"; `k` periods for "mean". On success
  // the audit log records who and the note and the new level is returned; otherwise not found,
  // conflict (no forecast yet, an intermittent method, too few actuals), invalid or store failed.
  Result<double> Reset(const std::string& key, const std::string& how, double value, int k,
                       const std::string& who, const std::string& note);
  // Milliseconds since the epoch of the last committed actual per policy (0 = none yet).
  std::int64_t LastArrival(const std::string& policy) const;
  std::int64_t now_ms() const { return clock_(); }
  // Series whose stored state was behind their actuals at start (after a crash) and were
  // brought up to date by replaying them.
  long recovered_series() const { return recovered_; }
  // The alert book and the database it writes to (reads for the alerts API).
  AlertBook& alerts() { return alerts_; }
  Db& db() { return store_.db(); }
  // Runs a hand change of an alert in its own transaction: committed when `action` succeeds,
  // rolled back with its status otherwise (a store failure becomes the sticky failure).
  Status AlertAction(const std::function<Status(AlertBook&, std::int64_t now_ms)>& action);

  // Engine thread: the portfolio as /metrics shows it, but for the pass over the series, which
  // AddSeriesHealth does from the read view taken with it (on any thread).
  EngineSnapshot Snapshot() const;
  const EngineCounters& counters() const { return counters_; }
  // Before Start: called on the engine thread with each commit's duration in seconds.
  void OnCommit(std::function<void(double)> observer) { on_commit_ = std::move(observer); }
  // Before Start: called (on the engine thread) after each commit that queued notifications.
  void OnOutbox(std::function<void()> listener) { on_outbox_ = std::move(listener); }

  // ---- Sharing series with other instances through Kafka (daemon/feeds/changelog.h) ----
  // Before Start: series are held per source partition; after every commit `publish` gets, on
  // the engine thread and in commit order, a record of each series changed and a position
  // record of each partition whose offsets moved; alert ids are made from the partition, the
  // series' number in it and its episode count; storm groups get ids from a range of this
  // store's own (by its installation id).
  using Publish = std::function<void(std::vector<ChangeRecord>&&)>;
  void ShareSeries(Publish publish) { publish_ = std::move(publish); }
  bool sharing() const { return static_cast<bool>(publish_); }
  // Engine thread: takes partition `part` of `topic` over from its changelog records (series
  // records by key and its position record, which may be absent for a partition never
  // written): the series of `part` held here are replaced by them in the store, the
  // partition's offset and next series number set, and (with `seat`) memory rebuilt. Without
  // `seat`, batches, re-levels, alert actions and housekeeping wait (busy) until Seat: several
  // partitions are adopted for one rebuild. Invalid naming the series for a record that does
  // not read (nothing is changed); store failed otherwise.
  Status Adopt(const std::string& topic, std::int32_t part, const std::vector<std::string>& records,
               const std::string& position, bool seat = true);
  // Engine thread: rebuilds memory from the store after Adopt without `seat`.
  Status Seat();
  // Engine thread: partitions revoked but kept in memory (eager rebalancing may give them back):
  // batches, re-levels, alert actions and housekeeping wait (busy) until Seat or Release, so
  // that nothing is published for partitions another instance may own by now.
  void Hold() { seating_ = true; }
  // Engine thread: lets partitions go: their series leave the store and memory.
  Status Release(const std::vector<std::int32_t>& parts);
  // Engine thread: the partitions whose series are held here.
  std::vector<std::int32_t> HeldPartitions() const;

 private:
  // DiagnoseAlert of the series at engine index `index` (the alert book's diagnoser has it).
  Result<monitors::AlertDiagnosis> DiagnoseSeries(std::size_t index, std::int64_t opened);
  struct Series {
    std::int64_t id = 0;
    std::string_view key;      // in keys_
    std::uint32_t labels = 0;  // index into label_sets_ (series share identical label sets)
    std::int32_t retained = 0;
    const config::Policy* policy = nullptr;
    std::int32_t part = -1, ordinal = 0, episodes = 0;  // SeriesPlace
    monitors::SeriesState state;
  };
  struct BiasSum {
    std::int64_t period = INT64_MIN;
    double errors = 0, actuals = 0;
    void Add(std::int64_t p, double e, double a) {
      if (p > period) *this = BiasSum{p, 0, 0};
      if (p == period) {
        errors += e;
        actuals += a;
      }
    }
  };
  struct Undo {
    std::size_t index;
    monitors::SeriesState state;
    std::int32_t retained;
    std::int32_t episodes;
  };
  struct Job {
    std::vector<IngestRow> rows;
    std::vector<SourceOffset> offsets;  // written with the rows, only when they are applied
    std::function<void(IngestReply)> done;
    std::function<void()> read;
    std::shared_ptr<const config::Settings> reload;
  };
  struct Pending {
    Job job;
    IngestReply reply;
    std::vector<Undo> undo;
    std::size_t series_before = 0;
    std::unordered_set<std::size_t> must_write;   // restated series: state written with the batch
    std::vector<const config::Policy*> policies;  // that received new actuals (a few)
    std::vector<AlertChange> alert_changes;
    std::size_t alert_mark = 0;
    AlertCounts alert_counts;  // what the batch recorded, counted after the commit
    std::vector<std::pair<const config::Policy*, BiasSum>> bias;  // a few policies
    std::vector<std::size_t> touched;  // series the batch changed (kept when sharing series)
  };

  void Run();
  // Loads every stored series into memory, replaying actuals newer than a lazily written state,
  // and opens the alert book.
  Status LoadAll();
  // Empties memory and loads it again (after partitions were adopted or released).
  Status Reseat();
  // Sharing: the id of the next alert episode of series `index` (0: let the store choose).
  std::int64_t NextAlertId(std::size_t index);
  // Sharing: the changelog records of the series in `changed` and the positions of the
  // partitions in `moved`, handed to publish_.
  void PublishChanges(std::vector<std::size_t> changed, const std::vector<std::int32_t>& moved);
  void ApplyBatch(Pending& p);
  bool ApplyRow(const IngestRow& row, Pending& p, std::vector<char>& touched,
                std::vector<std::size_t>& touched_list, bool& store_failed);
  bool Recompute(Series& s, std::vector<HistoryRow>* rows, monitors::SeriesState& out);
  Status Trim(Series& s, bool& trimmed);
  void MarkDirty(std::size_t index);
  // Adds series `index` to the alerting index when it holds a rule.
  void NoteAlerting(std::size_t index);
  // Series `index` changed outside a batch's own bookkeeping, or inside it: its read row is
  // recomputed for the next read view.
  void NoteChanged(std::size_t index);
  ReadRow ReadRowOf(std::size_t index) const;
  Status FlushDirty();  // inside an open transaction; the caller commits
  Status FlushAll();    // its own transaction: begin, the dirty states, commit
  void ClearDirty();
  void Rewind(Pending& p);
  void Fail(const std::string& why);
  // Makes a store failure the sticky failure; the failure in force (the first one) as a Status.
  Status Fail(const Status& store_failure);
  AlertSeries Info(std::size_t index) const;
  // After a commit: alert changes into the counters; wakes the delivery worker if they notify.
  void Committed(const AlertCounts& counts);
  Status OpenAlerts();
  // Snoozes that ran out and stale rules, every alerts.check_seconds.
  void Housekeeping();
  // Alert changes of one step of series `index` (episode bits of `r`).
  void CollectChanges(std::size_t index, const monitors::StepResult& r, std::int64_t period,
                      std::vector<AlertChange>& out) const;
  std::int64_t Today() const;  // days since 1970-01-01 by the clock
  bool IsStale(const Series& s, std::int64_t today) const;
  SeriesView View(std::size_t index, std::int64_t today) const;
  // Loads the checkpoint and runs all but the newest `leave_last` retained actuals through the
  // step, applying re-levels; `actuals` gets every retained actual. False on a store failure
  // (recorded) or when an actual does not step.
  bool ReplayCheckpoint(const Series& s, std::size_t leave_last, std::vector<StoredActual>& actuals,
                        monitors::SeriesState& state, std::vector<HistoryRow>* rows);

  std::shared_ptr<const config::Settings> settings_;  // engine thread only after Start
  const std::size_t queue_depth_;                     // read by Submit/Post on any thread
  Clock clock_;
  Store store_;
  struct KeyOf {
    const ChunkedVector<Series>* series;
    std::string_view operator()(std::size_t i) const { return (*series)[i].key; }
  };
  std::uint32_t InternLabels(const std::string& json);
  std::shared_ptr<KeyArena> keys_ = std::make_shared<KeyArena>();
  std::vector<std::string> label_sets_;
  std::unordered_map<std::string, std::uint32_t> label_ids_;
  ChunkedVector<Series> series_;
  SeriesIndex<KeyOf> index_{KeyOf{&series_}};
  std::unordered_map<std::string, std::int64_t> last_arrival_;
  std::vector<char> dirty_;    // per series: state not yet written
  std::vector<char> touched_;  // per series: changed by the batch being applied
  // The alerting index: every series whose state holds a rule, perhaps a few more (reads drop
  // those); 4 bytes per alerting series and a flag per series.
  mutable std::vector<std::uint32_t> alerting_;
  mutable std::vector<char> in_alerting_;
  // The read view's rows kept up to date (by series index), the series changed since the last
  // view, and the last view and identity table.
  std::vector<ReadRow> read_rows_;
  std::vector<std::uint32_t> read_changed_;
  std::vector<char> in_read_changed_;
  bool read_all_ = true;  // every row again (start, reload)
  std::uint64_t read_version_ = 0;
  std::shared_ptr<const ReadView> read_view_;
  std::shared_ptr<const ReadIdentity> read_identity_;
  std::size_t read_label_sets_ = 0;  // label sets in read_identity_
  std::size_t dirty_count_ = 0;
  std::int64_t last_flush_ms_ = 0;
  long recovered_ = 0;
  AlertBook alerts_;
  Handover handover_;
  std::int64_t last_housekeeping_ms_ = 0;
  std::function<void()> on_outbox_;
  EngineCounters counters_;
  std::function<void(double)> on_commit_;
  Publish publish_;
  bool seating_ = false;    // partitions adopted into the store, memory not rebuilt yet
  std::string install_id_;  // the store's (sharing: written in position records)
  std::unordered_map<std::int32_t, std::int32_t> next_ordinal_;  // by partition (sharing)
  std::unordered_map<std::int32_t, SourceOffset> positions_;     // by partition (sharing)
  // Portfolio bias per policy: errors and actuals of its newest period (batches add theirs
  // after the commit).
  std::unordered_map<const config::Policy*, BiasSum> bias_;

  mutable std::mutex mu_;
  std::condition_variable wake_;
  std::deque<Job> queue_;
  bool stopping_ = false;
  std::string failure_;
  std::thread thread_;
};

}  // namespace forewarden
