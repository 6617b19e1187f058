// The changelog of instances sharing series through Kafka (`kafka.changelog_topic`).
//
// Several `forewarden serve` processes in one consumer group split the source topic's
// partitions between them; each holds the series of the partitions assigned to it. After every
// commit the owner writes to the changelog topic, in the partition of the same number, one
// record per series changed (key: the series key; value: daemon/store/handover.h) and then the
// partition's position record (kPositionKey: {"topic", "next", "next_ordinal", "writer": the
// writing store's installation id}). The
// topic is compacted, so it keeps the newest record of every series.
//
// When a partition is assigned, the new owner reads its changelog partition from the beginning
// to the end it had when the reading began and keeps, per series, the newest record that a
// later position covers (header "through", the partition's next offset at the record's commit,
// at most the position's "next"): a record of a commit whose writer died before publishing its
// position is left out, and the series keeps its record before it. It adopts them
// (Engine::Adopt) before it consumes the partition from the newest position's offset.
//
// Records are produced by an idempotent producer that retries without limit, in commit order
// (the engine thread produces them), so that a partition's records never arrive out of order or
// with a gap; a record the brokers refuse for good stops consumption (the next owner would read
// a changelog with a hole) and is reported by readiness and the log.
#pragma once

#include <atomic>
#include <cstdint>
#include <functional>
#include <memory>
#include <mutex>
#include <string>
#include <unordered_map>
#include <utility>
#include <vector>

#include "config/settings.h"
#include "daemon/common/status.h"
#include "daemon/engine/engine.h"

namespace forewarden {

struct ChangelogCounters {
  std::atomic<long> records{0};        // records produced
  std::atomic<long> bytes{0};          // their keys and values, before compression
  std::atomic<long> failed{0};         // records the brokers refused for good
  std::atomic<long> restored{0};       // series adopted from the changelog
  std::atomic<long> restore_bytes{0};  // bytes read while restoring
  std::atomic<long> restores{0};       // partitions restored
  std::atomic<long> restore_ms{0};     // reading and adopting, summed
};

// One partition as read back: the newest record of each series and the position.
struct ChangelogPartition {
  std::vector<std::string> records;  // series records (values), one per series
  std::string position;              // "" when the partition was never written
  long read = 0;                     // records read
  long bytes = 0;                    // key and value bytes read
  long left_out = 0;                 // series records no position covers (an unfinished commit)
};

// The fold a restore makes of a partition read in order: per series the newest record that a
// position read after it covers (its "through" at most the position's "next"), and one newer
// still that none covers yet (a commit whose writer may have died before its position); a
// position promotes those it covers; those still uncovered at the end are left out, so their
// series keep the record before. Pure; tested on its own.
class ChangelogFold {
 public:
  void Series(std::string key, std::string value, std::int64_t through);
  void Position(std::string value);
  void Tombstone(const std::string& key);
  // The records kept, the newest position and how many were left out.
  void Finish(ChangelogPartition& out);

 private:
  std::unordered_map<std::string, std::string> committed_;
  std::unordered_map<std::string, std::pair<std::string, std::int64_t>> pending_;
  std::string position_;
  std::int64_t position_next_ = 0;
};

class Changelog {
 public:
  using Log = std::function<void(const std::string& line, const char* level)>;
  Changelog(config::Kafka settings, Log log);
  ~Changelog();
  Changelog(const Changelog&) = delete;
  Changelog& operator=(const Changelog&) = delete;

  // Creates the producer and the reader. Invalid when librdkafka refuses a property.
  Status Start();
  // Thread-safe (the engine thread calls it after each commit): queues the records.
  void Publish(std::vector<ChangeRecord>&& records);
  // Waits until every record queued so far is acknowledged; false when `stop` is set first or
  // a record was refused for good.
  bool Drain(const std::atomic<bool>& stop);
  // Reads partition `part` back; not ready (kUnavailable) with the reason when the brokers do
  // not answer or `stop` is set.
  Result<ChangelogPartition> Read(std::int32_t part, const std::atomic<bool>& stop);
  // "" while every record was taken; else why not.
  std::string broken() const;
  const ChangelogCounters& counters() const;
  // Partitions restored: their series adopted, and the time it took besides reading them.
  void CountRestore(long partitions, long series, long ms);
  void Stop();

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace forewarden
