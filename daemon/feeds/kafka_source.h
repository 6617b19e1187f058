// Actuals from Kafka topics (`kafka:` in the settings), consumed in a consumer group with
// librdkafka and applied through the same engine and rules as HTTP ingest.
//
// Messages: csv (one or more lines "series,period,value", no header; RFC 4180 quoting) or
// ndjson (one or more objects a message, the fields of HTTP's NDJSON). Producers key each
// message by its series key, so that a series always lands in one partition, in order.
//
// Exactly once into the store: the offsets consumed are written in the same SQLite transaction
// as the actuals they carried (Engine::Submit with offsets; table source_offsets), and on
// assignment each partition resumes from the offset stored there (from its beginning when
// none is), never from offsets committed to Kafka (forewarden commits none). After a crash the
// partition is read again from the last commit: nothing lost, nothing applied twice.
//
// Bad rows (poison messages): a message that does not parse, or a row the engine refuses (a
// period not after the series' last, a negative value under a policy that refuses them, ...),
// goes to the dead-letter topic as JSON {"topic", "partition", "offset", "key", "problems":
// [{"line", "field", "message"}], "message": the original text}, is counted, and the rest of
// the batch is applied without it; the partition never stalls on it. The dead-letter record
// is acknowledged by the brokers before the offsets that pass it are committed (a crash in
// between sends it again: at least once).
//
// One batch is in flight at a time: rows are gathered from many messages (up to batch_rows,
// or batch_ms), applied, and only then are more taken, so a rebalance finds nothing half-done:
// pending rows are applied before partitions are given up.
#pragma once

#include <atomic>
#include <functional>
#include <memory>
#include <string>
#include <thread>

#include "config/settings.h"
#include "daemon/batch/parse.h"
#include "daemon/engine/engine.h"

namespace forewarden {

struct KafkaCounters {
  std::atomic<long> messages{0};      // consumed
  std::atomic<long> rows{0};          // applied (as the engine counts them)
  std::atomic<long> dead_letters{0};  // messages sent to the dead-letter topic (or dropped)
  std::atomic<long> batches{0};       // engine batches committed
  std::atomic<long> errors{0};        // consumer and producer errors reported by librdkafka
  std::atomic<long> rebalances{0};    // assignments and revocations
  std::atomic<long> partitions{0};    // assigned now
  std::atomic<long> restoring{0};     // sharing: partitions being restored from the changelog
  // Messages on the assigned partitions not yet committed here: the brokers' newest offsets
  // (as last seen) less this instance's position, plus those gathered and not yet applied.
  // Updated about once a second.
  std::atomic<long> lag{0};
};

class Changelog;
struct ChangelogCounters;

class KafkaSource {
 public:
  using Log = std::function<void(const std::string& line, const char* level)>;
  KafkaSource(Engine& engine, config::Kafka settings, IngestLimits limits, Log log);
  ~KafkaSource();
  KafkaSource(const KafkaSource&) = delete;
  KafkaSource& operator=(const KafkaSource&) = delete;

  // Sharing series (kafka.changelog_topic; daemon/feeds/changelog.h), before the engine starts:
  // creates the changelog and hands the engine its publisher, naming this instance `owner`
  // (the URL other instances send requests for its series to). Invalid when librdkafka refuses
  // a property.
  Status Share(const std::string& owner);
  // Sharing: this instance's URL, once the port is known (before Start); and as set.
  void SetOwner(const std::string& owner);
  std::string Owner() const;
  // Creates the consumer (and the dead-letter producer), subscribes, starts the thread.
  // Invalid when librdkafka refuses a property.
  Status Start();
  // Sharing: "" when this instance answers for the partitions assigned to it; else why not
  // ("restoring partitions 3, 7 from the changelog", a changelog failure).
  std::string NotReady() const;
  // Sharing: the partition a series key belongs to (by kafka.partitioner), or -1 before the
  // source topic's partition count is known.
  std::int32_t PartitionOf(const std::string& key) const;
  // Sharing: each partition's owner as the group's committed offsets name it ("" unknown), by
  // partition; refreshed about every 2 seconds.
  std::vector<std::string> Owners() const;
  // Sharing: the partitions assigned here.
  std::vector<std::int32_t> Assigned() const;
  const ChangelogCounters* changelog_counters() const;
  // Applies what is gathered, leaves the group, stops the thread. Idempotent.
  void Stop();
  const KafkaCounters& counters() const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace forewarden
