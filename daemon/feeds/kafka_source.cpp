#include "daemon/feeds/kafka_source.h"

#include <librdkafka/rdkafka.h>

#include <algorithm>
#include <chrono>
#include <cstdlib>
#include <cstring>
#include <future>
#include <map>
#include <mutex>
#include <nlohmann/json.hpp>
#include <optional>
#include <set>
#include <sstream>
#include <utility>
#include <vector>

#include "daemon/common/log.h"
#include "daemon/feeds/changelog.h"

namespace forewarden {
namespace {

using json = nlohmann::json;
using Clock = std::chrono::steady_clock;

// One consumed message, kept until the batch that carries its rows commits.
struct Message {
  std::string topic;
  std::int32_t partition = 0;
  std::int64_t offset = 0;
  std::string key;
  std::string text;
  long first_row = 0, rows = 0;  // its rows in the batch: [first_row, first_row + rows)
  std::vector<RowProblem> problems;
};

struct KafkaDeleter {
  void operator()(rd_kafka_t* rk) const {
    if (rk) rd_kafka_destroy(rk);
  }
};
using KafkaHandle = std::unique_ptr<rd_kafka_t, KafkaDeleter>;

}  // namespace

struct KafkaSource::Impl {
  Engine& engine;
  config::Kafka settings;
  IngestLimits limits;
  Log log;
  KafkaCounters counters;
  KafkaHandle consumer, producer;
  std::thread thread;
  std::atomic<bool> stop{false};
  bool started = false;

  long undelivered = 0;  // dead letters the brokers did not take (producer callbacks, this thread)

  // ---- sharing series (kafka.changelog_topic) ----
  std::unique_ptr<Changelog> changelog;
  std::string owner_url;
  mutable std::mutex share_mu;           // guards the four below (read by HTTP threads)
  std::vector<std::string> owners;       // by partition, from the group's commits
  std::vector<std::int32_t> held_parts;  // assigned here
  std::string not_ready;                 // "" when answering for `assigned`
  std::int32_t partition_count = -1;
  // eager rebalancing revokes every partition before assigning again: partitions revoked,
  // with their changelog's end offset then; one given back with that end unchanged has
  // nothing newer in the changelog than what is held here
  std::map<std::int32_t, std::int64_t> kept;
  bool sharing() const { return static_cast<bool>(changelog); }

  std::string Owner() const {
    std::lock_guard lock(share_mu);
    return owner_url;
  }

  void SetNotReady(std::string why) {
    std::lock_guard lock(share_mu);
    not_ready = std::move(why);
  }

  // Runs `job` on the engine thread and waits for it; nullopt when stopping first.
  template <class T>
  std::optional<T> OnEngine(std::function<T()> job) {
    for (auto backoff = std::chrono::milliseconds(10);;
         backoff = std::min(backoff * 2, std::chrono::milliseconds(2000))) {
      auto promise = std::make_shared<std::promise<T>>();
      auto future = promise->get_future();
      if (engine.Post([job, promise] { promise->set_value(job()); })) return future.get();
      if (stop.load()) return std::nullopt;
      std::this_thread::sleep_for(backoff);
    }
  }

  // The source topic's partition count (metadata request).
  void LearnPartitionCount() {
    rd_kafka_topic_t* rkt = rd_kafka_topic_new(consumer.get(), settings.topics[0].c_str(), nullptr);
    const rd_kafka_metadata_t* md = nullptr;
    if (rkt && rd_kafka_metadata(consumer.get(), 0, rkt, &md, 5000) == RD_KAFKA_RESP_ERR_NO_ERROR) {
      if (md->topic_cnt == 1 && md->topics[0].err == RD_KAFKA_RESP_ERR_NO_ERROR) {
        std::lock_guard lock(share_mu);
        partition_count = md->topics[0].partition_cnt;
        owners.resize(static_cast<std::size_t>(partition_count));
      }
      rd_kafka_metadata_destroy(md);
    }
    if (rkt) rd_kafka_topic_destroy(rkt);
  }

  // Who owns each partition: the metadata of the group's committed offsets (each owner commits
  // its URL with them: Announce and Fence).
  void RefreshOwners() {
    std::int32_t n;
    {
      std::lock_guard lock(share_mu);
      n = partition_count;
    }
    if (n <= 0) return LearnPartitionCount();
    rd_kafka_topic_partition_list_t* list = rd_kafka_topic_partition_list_new(n);
    for (std::int32_t p = 0; p < n; ++p)
      rd_kafka_topic_partition_list_add(list, settings.topics[0].c_str(), p);
    std::vector<SourceOffset> claim;  // held here but named otherwise: announced again
    if (rd_kafka_committed(consumer.get(), list, 2000) == RD_KAFKA_RESP_ERR_NO_ERROR) {
      std::vector<std::string> now(static_cast<std::size_t>(n));
      for (int i = 0; i < list->cnt; ++i) {
        const rd_kafka_topic_partition_t& e = list->elems[i];
        if (!e.metadata || e.partition < 0 || e.partition >= n) continue;
        std::string url(static_cast<const char*>(e.metadata), e.metadata_size);
        // only what an instance commits: an http(s) URL, no spaces or control characters (it
        // becomes a Location header)
        const bool plain = std::all_of(url.begin(), url.end(), [](char c) {
          return static_cast<unsigned char>(c) > 0x20 && c != 0x7f;
        });
        if (plain && url.size() < 2048 &&
            (url.rfind("http://", 0) == 0 || url.rfind("https://", 0) == 0))
          now[static_cast<std::size_t>(e.partition)] = std::move(url);
      }
      const std::string self = Owner();
      std::lock_guard lock(share_mu);
      for (std::int32_t p : held_parts)
        if (p >= 0 && p < n && now[static_cast<std::size_t>(p)] != self) {
          const rd_kafka_topic_partition_t* e =
              rd_kafka_topic_partition_list_find(list, settings.topics[0].c_str(), p);
          claim.push_back({settings.topics[0], p, e && e->offset >= 0 ? e->offset : 0});
        }
      owners = std::move(now);
    }
    rd_kafka_topic_partition_list_destroy(list);
    // an announcement lost in a rebalance (the group refused it) is made again
    if (!claim.empty()) CommitOwned(claim);
  }

  // Commits `offsets` to the group synchronously with this instance's URL as their metadata.
  // The group coordinator refuses a member of an older generation: then this instance no longer
  // owns them (another may) and must not apply or publish anything of theirs.
  rd_kafka_resp_err_t CommitOwned(const std::vector<SourceOffset>& offsets) {
    if (offsets.empty()) return RD_KAFKA_RESP_ERR_NO_ERROR;
    rd_kafka_topic_partition_list_t* list =
        rd_kafka_topic_partition_list_new(static_cast<int>(offsets.size()));
    for (const SourceOffset& o : offsets) {
      rd_kafka_topic_partition_t* e =
          rd_kafka_topic_partition_list_add(list, o.topic.c_str(), o.partition);
      e->offset = o.next;
      const std::string url = Owner();
      e->metadata = std::malloc(url.size() + 1);  // freed with the list
      std::memcpy(e->metadata, url.data(), url.size());
      e->metadata_size = url.size();
    }
    // Asynchronous on a queue of its own, waited for in slices: a synchronous commit can block
    // for as long as the group coordinator does not answer, and a stop must not wait on it.
    rd_kafka_queue_t* queue = rd_kafka_queue_new(consumer.get());
    rd_kafka_resp_err_t err = rd_kafka_commit_queue(consumer.get(), list, queue, nullptr, nullptr);
    rd_kafka_topic_partition_list_destroy(list);
    if (err == RD_KAFKA_RESP_ERR_NO_ERROR) {
      err = RD_KAFKA_RESP_ERR__TIMED_OUT;
      for (int slice = 0; slice < 100 && !stop.load(); ++slice) {  // 10 s at most
        rd_kafka_event_t* ev = rd_kafka_queue_poll(queue, 100);
        if (!ev) continue;
        const bool done = rd_kafka_event_type(ev) == RD_KAFKA_EVENT_OFFSET_COMMIT;
        if (done) err = rd_kafka_event_error(ev);
        rd_kafka_event_destroy(ev);
        if (done) break;
      }
    }
    rd_kafka_queue_destroy(queue);
    return err;
  }

  static bool Fenced(rd_kafka_resp_err_t err) {
    return err == RD_KAFKA_RESP_ERR_ILLEGAL_GENERATION ||
           err == RD_KAFKA_RESP_ERR_UNKNOWN_MEMBER_ID ||
           err == RD_KAFKA_RESP_ERR_REBALANCE_IN_PROGRESS ||
           err == RD_KAFKA_RESP_ERR_FENCED_INSTANCE_ID || err == RD_KAFKA_RESP_ERR__STATE ||
           err == RD_KAFKA_RESP_ERR__NO_OFFSET;
  }

  // Before a batch is applied: this instance still owns the partitions it read it from.
  bool Fence() {
    std::map<std::pair<std::string, std::int32_t>, std::int64_t> first;
    for (const Message& m : pending) {
      auto [it, fresh] = first.try_emplace({m.topic, m.partition}, m.offset);
      if (!fresh) it->second = std::min(it->second, m.offset);
    }
    std::vector<SourceOffset> at;
    at.reserve(first.size());
    for (const auto& [tp, offset] : first) at.push_back({tp.first, tp.second, offset});
    for (auto backoff = std::chrono::milliseconds(50);;
         backoff = std::min(backoff * 2, std::chrono::milliseconds(2000))) {
      const rd_kafka_resp_err_t err = CommitOwned(at);
      if (err == RD_KAFKA_RESP_ERR_NO_ERROR) return true;
      if (Fenced(err)) {
        log(std::string("kafka: no longer the owner of the partitions read (") +
                rd_kafka_err2name(err) + "): the batch is dropped",
            "warn");
        return false;
      }
      if (stop.load()) return false;
      log(std::string("kafka: cannot confirm ownership with the group: ") + rd_kafka_err2str(err),
          "warn");
      std::this_thread::sleep_for(backoff);
    }
  }

  // The changelog's end offset of partition `part` (-1 when the brokers do not say).
  std::int64_t ChangelogEnd(std::int32_t part) {
    std::int64_t low = 0, high = -1;
    if (rd_kafka_query_watermark_offsets(consumer.get(), settings.changelog_topic.c_str(), part,
                                         &low, &high, 5000) != RD_KAFKA_RESP_ERR_NO_ERROR)
      return -1;
    return high;
  }

  static std::string PartList(const std::vector<std::int32_t>& parts) {
    std::ostringstream out;
    for (std::size_t i = 0; i < parts.size(); ++i) out << (i ? ", " : "") << parts[i];
    return out.str();
  }

  // Takes over the partitions of `parts` (sharing): releases the partitions held here that are
  // neither among them nor still assigned, restores `parts` from the changelog unless what is
  // held is current, and announces ownership. False when stopping first.
  bool TakeOver(rd_kafka_topic_partition_list_t* parts) {
    std::vector<std::int32_t> want;
    want.reserve(static_cast<std::size_t>(parts->cnt));
    for (int i = 0; i < parts->cnt; ++i) want.push_back(parts->elems[i].partition);
    std::sort(want.begin(), want.end());
    SetNotReady("restoring partitions " + PartList(want) + " from the changelog");
    counters.restoring.store(static_cast<long>(want.size()));
    struct Done {
      std::atomic<long>& restoring;
      ~Done() { restoring.store(0); }
    } done{counters.restoring};
    std::optional<std::vector<std::int32_t>> held =
        OnEngine<std::vector<std::int32_t>>([this] { return engine.HeldPartitions(); });
    if (!held) return false;
    // keep what stays assigned (cooperative rebalancing assigns only the partitions added)
    std::vector<std::int32_t> keep = want;
    {
      std::lock_guard lock(share_mu);
      keep.insert(keep.end(), held_parts.begin(), held_parts.end());
    }
    std::sort(keep.begin(), keep.end());
    std::vector<std::int32_t> drop;
    for (std::int32_t h : *held)
      if (!std::binary_search(keep.begin(), keep.end(), h)) drop.push_back(h);
    if (!drop.empty()) {
      std::optional<Status> released =
          OnEngine<Status>([this, drop] { return engine.Release(drop); });
      if (!released) return false;
      if (!*released)
        log("kafka: releasing partitions " + PartList(drop) + ": " + released->message(), "error");
      else
        log("kafka: released partitions " + PartList(drop), "info");
    }
    for (std::int32_t part : want) {
      auto k = kept.find(part);
      if (k != kept.end() && k->second >= 0 && ChangelogEnd(part) == k->second) continue;
      for (auto backoff = std::chrono::milliseconds(100);;
           backoff = std::min(backoff * 2, std::chrono::milliseconds(5000))) {
        if (stop.load()) return false;
        const auto reading = Clock::now();
        Result<ChangelogPartition> read = changelog->Read(part, stop);
        if (!read) {
          if (stop.load()) return false;
          log("kafka: restoring partition " + std::to_string(part) + ": " + read.status().message(),
              "warn");
          std::this_thread::sleep_for(backoff);
          continue;
        }
        const auto adopting = Clock::now();
        const std::string topic = settings.topics[0];
        auto records = std::make_shared<ChangelogPartition>(std::move(*read));
        std::optional<Status> adopted = OnEngine<Status>([this, topic, part, records] {
          return engine.Adopt(topic, part, records->records, records->position, false);
        });
        if (!adopted) return false;
        if (!*adopted) {
          SetNotReady("partition " + std::to_string(part) +
                      ": the changelog cannot be adopted: " + adopted->message());
          log("kafka: partition " + std::to_string(part) +
                  ": the changelog cannot be adopted: " + adopted->message(),
              "error");
          OnEngine<Status>([this] { return engine.Seat(); });  // what was adopted before it
          return false;
        }
        const auto ms = [](Clock::duration d) {
          return std::chrono::duration_cast<std::chrono::milliseconds>(d).count();
        };
        changelog->CountRestore(1, static_cast<long>(records->records.size()),
                                ms(Clock::now() - adopting));
        log("kafka: partition " + std::to_string(part) +
                " restored: " + std::to_string(records->records.size()) + " series from " +
                std::to_string(records->read) + " changelog records" +
                (records->left_out ? " (" + std::to_string(records->left_out) +
                                         " of a commit never finished left out)"
                                   : std::string()) +
                " (read in " + std::to_string(ms(adopting - reading)) + " ms, stored in " +
                std::to_string(ms(Clock::now() - adopting)) + " ms)",
            "info");
        break;
      }
    }
    kept.clear();
    // one rebuild of memory for every partition adopted
    const auto seating = Clock::now();
    std::optional<Status> seated = OnEngine<Status>([this] { return engine.Seat(); });
    const long seat_ms = static_cast<long>(
        std::chrono::duration_cast<std::chrono::milliseconds>(Clock::now() - seating).count());
    changelog->CountRestore(0, 0, seat_ms);
    log("kafka: " + std::to_string(want.size()) + " partition(s) held, loaded in " +
            std::to_string(seat_ms) + " ms",
        "info");
    if (!seated) return false;
    if (!*seated) {
      SetNotReady("restored partitions cannot be loaded: " + seated->message());
      log("kafka: restored partitions cannot be loaded: " + seated->message(), "error");
      return false;
    }
    return true;
  }
  std::vector<Message> pending;
  std::vector<IngestRow> rows;
  Clock::time_point first_pending{};

  Impl(Engine& e, config::Kafka s, IngestLimits l, Log lg)
      : engine(e), settings(std::move(s)), limits(l), log(std::move(lg)) {}

  // librdkafka configuration with the pass-through properties, then forewarden's own.
  rd_kafka_conf_t* Conf(bool consumer_side, std::string& error) {
    rd_kafka_conf_t* conf = rd_kafka_conf_new();
    char why[512];
    auto set = [&](const std::string& k, const std::string& v) {
      if (rd_kafka_conf_set(conf, k.c_str(), v.c_str(), why, sizeof why) != RD_KAFKA_CONF_OK) {
        error =
            "kafka." + std::string(consumer_side ? "" : "dead-letter producer: ") + k + ": " + why;
        return false;
      }
      return true;
    };
    bool ok = true;
    for (const auto& [k, v] : settings.properties) ok = ok && set(k, v);
    ok = ok && set("bootstrap.servers", settings.brokers);
    if (consumer_side && !settings.changelog_topic.empty())
      ok = ok && set("client.id", "forewarden");
    if (consumer_side) {
      ok = ok && set("group.id", settings.group) && set("enable.auto.commit", "false") &&
           set("enable.auto.offset.store", "false") && set("auto.offset.reset", "earliest") &&
           set("enable.partition.eof", "false");
    } else {
      ok = ok && set("enable.idempotence", "true");
      // a dead letter that could not be delivered is counted, so that it is sent again
      rd_kafka_conf_set_dr_msg_cb(conf, [](rd_kafka_t* rk, const rd_kafka_message_t* m, void*) {
        if (m->err) static_cast<Impl*>(rd_kafka_opaque(rk))->undelivered += 1;
      });
    }
    if (!ok) {
      rd_kafka_conf_destroy(conf);
      return nullptr;
    }
    rd_kafka_conf_set_opaque(conf, this);
    // librdkafka's own lines in the service's log format (they went to stderr raw)
    rd_kafka_conf_set_log_cb(
        conf, [](const rd_kafka_t* rk, int level, const char* fac, const char* buf) {
          auto* self = static_cast<Impl*>(rd_kafka_opaque(rk));
          // the pass-through properties serve consumer and producer alike: not a problem
          if (KafkaPropertyScopeNote(buf)) return;
          if (self) self->log(std::string("kafka: ") + fac + ": " + buf, SyslogLevel(level));
        });
    rd_kafka_conf_set_error_cb(conf, [](rd_kafka_t*, int err, const char* reason, void* opaque) {
      auto* self = static_cast<Impl*>(opaque);
      self->counters.errors.fetch_add(1);
      self->log(std::string("kafka: ") + rd_kafka_err2name(static_cast<rd_kafka_resp_err_t>(err)) +
                    ": " + reason,
                "warn");
    });
    return conf;
  }

  Status Start() {
    std::string error;
    rd_kafka_conf_t* conf = Conf(true, error);
    if (!conf) return Status::Invalid(error);
    rd_kafka_conf_set_rebalance_cb(
        conf, [](rd_kafka_t* rk, rd_kafka_resp_err_t err, rd_kafka_topic_partition_list_t* parts,
                 void* opaque) { static_cast<Impl*>(opaque)->Rebalance(rk, err, parts); });
    char why[512];
    consumer.reset(rd_kafka_new(RD_KAFKA_CONSUMER, conf, why, sizeof why));
    if (!consumer) {
      rd_kafka_conf_destroy(conf);
      return Status::Invalid(std::string("kafka: ") + why);
    }
    rd_kafka_poll_set_consumer(consumer.get());
    if (!settings.dead_letter_topic.empty()) {
      rd_kafka_conf_t* pconf = Conf(false, error);
      if (!pconf) return Status::Invalid(error);
      producer.reset(rd_kafka_new(RD_KAFKA_PRODUCER, pconf, why, sizeof why));
      if (!producer) {
        rd_kafka_conf_destroy(pconf);
        return Status::Invalid(std::string("kafka: dead-letter producer: ") + why);
      }
    }
    rd_kafka_topic_partition_list_t* topics =
        rd_kafka_topic_partition_list_new(static_cast<int>(settings.topics.size()));
    for (const std::string& t : settings.topics)
      rd_kafka_topic_partition_list_add(topics, t.c_str(), RD_KAFKA_PARTITION_UA);
    const rd_kafka_resp_err_t sub = rd_kafka_subscribe(consumer.get(), topics);
    rd_kafka_topic_partition_list_destroy(topics);
    if (sub != RD_KAFKA_RESP_ERR_NO_ERROR)
      return Status::Invalid(std::string("kafka: subscribe: ") + rd_kafka_err2str(sub));
    started = true;
    thread = std::thread([this] { Run(); });
    log("kafka: consuming " + std::to_string(settings.topics.size()) + " topic(s) as group '" +
            settings.group + "' from " + settings.brokers,
        "info");
    return Status::Ok();
  }

  void Stop() {
    if (!started) return;
    started = false;
    stop.store(true);
    if (thread.joinable()) thread.join();
    // Leaves the group (the revocation applies nothing: pending was applied by Run's end).
    rd_kafka_consumer_close(consumer.get());
    consumer.reset();
    if (producer) rd_kafka_flush(producer.get(), 5000);
    producer.reset();
    if (changelog) changelog->Stop();  // what the last batches published reaches the brokers
  }

  void Run() {
    Clock::time_point lag_at{}, owners_at{};
    while (!stop.load()) {
      if (Clock::now() - lag_at >= std::chrono::seconds(1)) {
        counters.lag.store(Lag());
        lag_at = Clock::now();
      }
      if (sharing() && Clock::now() - owners_at >= std::chrono::seconds(2)) {
        RefreshOwners();
        owners_at = Clock::now();
      }
      rd_kafka_message_t* m = rd_kafka_consumer_poll(consumer.get(), 100);
      if (m) {
        Take(*m);
        rd_kafka_message_destroy(m);
      }
      const bool full = static_cast<long>(rows.size()) >= settings.batch_rows;
      const bool waited = !pending.empty() && Clock::now() - first_pending >=
                                                  std::chrono::milliseconds(settings.batch_ms);
      if ((full || waited || (!m && !pending.empty())) && !Flush() && !stop.load()) {
        // The dead-letter topic did not take the refused messages: nothing of the batch is
        // committed. Drop it and read it again from the stored offsets after a pause, rather
        // than gather more and more while the brokers cannot take it.
        std::this_thread::sleep_for(std::chrono::milliseconds(500));
        Rewind();
      }
    }
    Flush();
  }

  // The messages behind (KafkaCounters::lag), from librdkafka's cached watermarks: no request.
  long Lag() {
    rd_kafka_topic_partition_list_t* assigned = nullptr;
    if (rd_kafka_assignment(consumer.get(), &assigned) != RD_KAFKA_RESP_ERR_NO_ERROR)
      return counters.lag.load();
    rd_kafka_position(consumer.get(), assigned);
    long behind = static_cast<long>(pending.size());
    for (int i = 0; i < assigned->cnt; ++i) {
      const rd_kafka_topic_partition_t& p = assigned->elems[i];
      std::int64_t low = 0, high = 0;
      if (rd_kafka_get_watermark_offsets(consumer.get(), p.topic, p.partition, &low, &high) !=
              RD_KAFKA_RESP_ERR_NO_ERROR ||
          high < 0)
        continue;
      const std::int64_t at = p.offset >= 0 ? p.offset : low;
      behind += static_cast<long>(std::max<std::int64_t>(0, high - at));
    }
    rd_kafka_topic_partition_list_destroy(assigned);
    return behind;
  }

  // Drops what was gathered and not committed, and moves every assigned partition back to the
  // offset stored with the last actuals committed from it.
  void Rewind() {
    pending.clear();
    rows.clear();
    rd_kafka_topic_partition_list_t* assigned = nullptr;
    if (rd_kafka_assignment(consumer.get(), &assigned) != RD_KAFKA_RESP_ERR_NO_ERROR) return;
    std::optional<std::vector<SourceOffset>> stored =
        assigned->cnt > 0 ? StoredOffsets() : std::nullopt;
    if (stored) {
      for (int i = 0; i < assigned->cnt; ++i) {
        rd_kafka_topic_partition_t& p = assigned->elems[i];
        p.offset = RD_KAFKA_OFFSET_BEGINNING;
        for (const SourceOffset& s : *stored)
          if (s.topic == p.topic && s.partition == p.partition) p.offset = s.next;
      }
      if (rd_kafka_error_t* e = rd_kafka_seek_partitions(consumer.get(), assigned, 10000)) {
        log(std::string("kafka: seeking back to the stored offsets: ") + rd_kafka_error_string(e),
            "error");
        rd_kafka_error_destroy(e);
      }
    }
    rd_kafka_topic_partition_list_destroy(assigned);
  }

  // Gathers one message's rows (or its problems).
  void Take(const rd_kafka_message_t& m) {
    if (m.err) {
      if (m.err == RD_KAFKA_RESP_ERR__PARTITION_EOF) return;
      counters.errors.fetch_add(1);
      log(std::string("kafka: consumer: ") + rd_kafka_message_errstr(&m), "warn");
      return;
    }
    counters.messages.fetch_add(1);
    Message msg;
    msg.topic = rd_kafka_topic_name(m.rkt);
    msg.partition = m.partition;
    msg.offset = m.offset;
    if (m.key) msg.key.assign(static_cast<const char*>(m.key), m.key_len);
    if (m.payload) msg.text.assign(static_cast<const char*>(m.payload), m.len);
    // csv messages carry no header: the fixed columns go first, so lines number from 2
    ParsedBatch parsed = settings.format == config::Kafka::Format::kCsv
                             ? ParseCsvBatch("series,period,value\n" + msg.text, limits)
                             : ParseNdjsonBatch(msg.text, limits);
    const long shift = settings.format == config::Kafka::Format::kCsv ? 1 : 0;
    if (parsed.problem_count > 0 || parsed.rows.empty()) {
      msg.problems = std::move(parsed.problems);
      for (RowProblem& p : msg.problems) p.line -= shift;
      if (msg.problems.empty()) msg.problems.push_back({0, "", "the message holds no row"});
    } else {
      msg.first_row = static_cast<long>(rows.size());
      msg.rows = static_cast<long>(parsed.rows.size());
      for (IngestRow& r : parsed.rows) {
        r.partition = m.partition;  // instances sharing series hold them by partition
        rows.push_back(std::move(r));
      }
    }
    if (pending.empty()) first_pending = Clock::now();
    pending.push_back(std::move(msg));
  }

  // The next offset of every partition the pending messages came from.
  std::vector<SourceOffset> Offsets() const {
    std::map<std::pair<std::string, std::int32_t>, std::int64_t> next;
    for (const Message& m : pending) {
      auto& n = next[{m.topic, m.partition}];
      n = std::max(n, m.offset + 1);
    }
    std::vector<SourceOffset> out;
    out.reserve(next.size());
    for (const auto& [tp, n] : next) out.push_back({tp.first, tp.second, n});
    return out;
  }

  // Applies the pending messages' rows with their offsets, sending the refused messages to the
  // dead-letter topic first. Returns when committed (or when stopping makes waiting pointless:
  // the rows are read again from the stored offsets after a restart).
  bool Flush() {
    if (pending.empty()) return true;
    std::set<std::size_t> dead;  // messages refused
    for (std::size_t i = 0; i < pending.size(); ++i)
      if (!pending[i].problems.empty()) dead.insert(i);
    std::vector<std::size_t> owner;              // batch row -> message
    std::vector<long> first(pending.size(), 0);  // message -> its first row in the batch
    for (;;) {
      std::vector<IngestRow> batch;
      owner.clear();
      for (std::size_t i = 0; i < pending.size(); ++i) {
        if (dead.count(i)) continue;
        const Message& m = pending[i];
        first[i] = static_cast<long>(owner.size());
        for (long r = 0; r < m.rows; ++r) {
          IngestRow row = rows[static_cast<std::size_t>(m.first_row + r)];
          owner.push_back(i);
          row.line = static_cast<long>(owner.size());  // problems name it back
          batch.push_back(std::move(row));
        }
      }
      // The refused messages are in the dead-letter topic before the offsets pass them.
      if (!DeadLetter(dead)) return false;
      if (sharing() && !changelog->broken().empty()) return false;  // a hole would follow
      if (sharing() && !Fence()) return false;
      std::optional<IngestReply> reply = Apply(batch);
      if (!reply) return false;  // stopping
      if (reply->status == IngestReply::Status::kOk) {
        counters.rows.fetch_add(reply->counts.rows);
        counters.batches.fetch_add(1);
        break;
      }
      // Refused rows: their messages go to the dead-letter topic, the rest is applied again.
      for (const RowProblem& p : reply->problems) {
        if (p.line < 1 || p.line > static_cast<long>(owner.size())) continue;
        const std::size_t i = owner[static_cast<std::size_t>(p.line - 1)];
        Message& m = pending[i];
        RowProblem q = p;
        q.line = p.line - first[i];  // the line within the message
        m.problems.push_back(std::move(q));
        dead.insert(i);
      }
      if (reply->problems.empty()) {  // refused without a row named: cannot go on safely
        log("kafka: a batch was refused without a row named; retrying", "warn");
        std::this_thread::sleep_for(std::chrono::milliseconds(200));
      }
    }
    pending.clear();
    rows.clear();
    return true;
  }

  // Hands a batch (with the pending offsets) to the engine until it takes it; nullopt when
  // stopping first.
  std::optional<IngestReply> Apply(const std::vector<IngestRow>& batch) {
    auto backoff = std::chrono::milliseconds(10);
    for (;;) {
      std::promise<IngestReply> promise;
      auto future = promise.get_future();
      if (engine.Submit(batch, Offsets(),
                        [&promise](IngestReply r) { promise.set_value(std::move(r)); })) {
        IngestReply reply = future.get();
        if (reply.status != IngestReply::Status::kUnavailable) return reply;
        log("kafka: the store cannot take the batch now: " + reply.error, "warn");
      }
      if (stop.load()) return std::nullopt;
      std::this_thread::sleep_for(backoff);
      backoff = std::min(backoff * 2, std::chrono::milliseconds(2000));
    }
  }

  // Sends the refused messages of `dead` not yet sent; true once the brokers acknowledged all.
  bool DeadLetter(const std::set<std::size_t>& dead) {
    const long undelivered_before = undelivered;
    std::vector<std::size_t> sent;
    for (std::size_t i : dead) {
      Message& m = pending[i];
      if (m.rows < 0) continue;  // sent
      json problems = json::array();
      for (const RowProblem& p : m.problems)
        problems.push_back({{"line", p.line}, {"field", p.field}, {"message", p.message}});
      const std::string record =
          json{{"topic", m.topic}, {"partition", m.partition}, {"offset", m.offset},
               {"key", m.key},     {"problems", problems},     {"message", m.text}}
              .dump(-1, ' ', false, json::error_handler_t::replace);
      if (!producer) {
        log("kafka: refused message (no dead_letter_topic): " + record, "warn");
      } else {
        for (;;) {
          const rd_kafka_resp_err_t err = rd_kafka_producev(
              producer.get(), RD_KAFKA_V_TOPIC(settings.dead_letter_topic.c_str()),
              RD_KAFKA_V_KEY(m.key.data(), m.key.size()),
              RD_KAFKA_V_VALUE(const_cast<char*>(record.data()), record.size()),
              RD_KAFKA_V_MSGFLAGS(RD_KAFKA_MSG_F_COPY), RD_KAFKA_V_END);
          if (err == RD_KAFKA_RESP_ERR_NO_ERROR) break;
          if (err != RD_KAFKA_RESP_ERR__QUEUE_FULL || stop.load()) {
            counters.errors.fetch_add(1);
            log(std::string("kafka: dead-letter topic: ") + rd_kafka_err2str(err), "error");
            return false;
          }
          rd_kafka_poll(producer.get(), 100);
        }
      }
      m.rows = -1;  // sent (rows of a refused message are never applied)
      sent.push_back(i);
    }
    if (producer) {
      // Delivered (idempotent producer: retried inside librdkafka) before the offsets move on.
      while (rd_kafka_flush(producer.get(), 1000) != RD_KAFKA_RESP_ERR_NO_ERROR) {
        if (stop.load()) return false;
        log("kafka: waiting for the dead-letter topic to take refused messages", "warn");
      }
      if (undelivered != undelivered_before) {
        // some were not taken (message timeout): this round's go again (at least once)
        for (std::size_t i : sent) pending[i].rows = 0;
        counters.errors.fetch_add(1);
        log("kafka: the dead-letter topic did not take refused messages; sending them again",
            "error");
        return false;
      }
    }
    counters.dead_letters.fetch_add(static_cast<long>(sent.size()));
    return true;
  }

  // The offsets stored, read on the engine thread; nullopt when stopping first.
  std::optional<std::vector<SourceOffset>> StoredOffsets() {
    for (auto backoff = std::chrono::milliseconds(10);;
         backoff = std::min(backoff * 2, std::chrono::milliseconds(2000))) {
      std::promise<std::optional<std::vector<SourceOffset>>> promise;
      auto future = promise.get_future();
      const bool posted = engine.Post([this, &promise] {
        std::vector<SourceOffset> out;
        if (Status read = engine.StoredOffsets(out); !read) {
          log("kafka: reading the stored offsets: " + read.message(), "error");
          promise.set_value(std::nullopt);
          return;
        }
        promise.set_value(std::move(out));
      });
      if (posted)
        if (auto got = future.get()) return got;
      if (stop.load()) return std::nullopt;
      std::this_thread::sleep_for(backoff);
    }
  }

  void Rebalance(rd_kafka_t* rk, rd_kafka_resp_err_t err, rd_kafka_topic_partition_list_t* parts) {
    counters.rebalances.fetch_add(1);
    const bool cooperative = std::string(rd_kafka_rebalance_protocol(rk)) == "COOPERATIVE";
    if (sharing() && err == RD_KAFKA_RESP_ERR__ASSIGN_PARTITIONS) {
      LearnPartitionCount();
      if (!TakeOver(parts)) return;  // stopping, or a changelog that cannot be adopted
    }
    if (sharing() && err != RD_KAFKA_RESP_ERR__ASSIGN_PARTITIONS) {
      // What was read is applied and in the changelog before another instance reads it back.
      const bool applied = Flush();
      pending.clear();
      rows.clear();
      const bool drained = changelog->Drain(stop);
      std::vector<std::int32_t> gone;
      gone.reserve(static_cast<std::size_t>(parts->cnt));
      for (int i = 0; i < parts->cnt; ++i) gone.push_back(parts->elems[i].partition);
      if (cooperative || !applied || !drained) {
        kept.clear();
        std::optional<Status> released =
            OnEngine<Status>([this, gone] { return engine.Release(gone); });
        if (released && !*released)
          log("kafka: releasing partitions: " + released->message(), "error");
      } else {
        for (std::int32_t part : gone) kept[part] = ChangelogEnd(part);
        // kept in memory but not owned: nothing of them changes or is published until then
        OnEngine<bool>([this] {
          engine.Hold();
          return true;
        });
      }
      {
        std::lock_guard lock(share_mu);
        std::vector<std::int32_t> left;
        for (std::int32_t a : held_parts)
          if (std::find(gone.begin(), gone.end(), a) == gone.end()) left.push_back(a);
        held_parts = std::move(left);
      }
      if (cooperative) {
        rd_kafka_error_destroy(rd_kafka_incremental_unassign(rk, parts));
        counters.partitions.fetch_sub(parts->cnt);
      } else {
        rd_kafka_assign(rk, nullptr);
        counters.partitions.store(0);
      }
      log("kafka: " + std::to_string(parts->cnt) + " partition(s) revoked", "info");
      return;
    }
    if (err == RD_KAFKA_RESP_ERR__ASSIGN_PARTITIONS) {
      // Resume every partition from the store (its beginning when it has none). Without the
      // stored offsets nothing is assigned: reading from the beginning would apply rows twice.
      std::optional<std::vector<SourceOffset>> stored = StoredOffsets();
      if (!stored) return;  // stopping
      for (int i = 0; i < parts->cnt; ++i) {
        rd_kafka_topic_partition_t& p = parts->elems[i];
        p.offset = RD_KAFKA_OFFSET_BEGINNING;
        for (const SourceOffset& s : *stored)
          if (s.topic == p.topic && s.partition == p.partition) p.offset = s.next;
      }
      if (cooperative)
        rd_kafka_error_destroy(rd_kafka_incremental_assign(rk, parts));
      else
        rd_kafka_assign(rk, parts);
      counters.partitions.fetch_add(parts->cnt);
      log("kafka: assigned " + std::to_string(parts->cnt) + " partition(s)", "info");
      if (sharing()) {
        // ownership announced to the group (the partition map other instances redirect by)
        std::vector<SourceOffset> at;
        at.reserve(static_cast<std::size_t>(parts->cnt));
        for (int i = 0; i < parts->cnt; ++i)
          at.push_back({parts->elems[i].topic, parts->elems[i].partition,
                        std::max<std::int64_t>(0, parts->elems[i].offset)});
        if (const rd_kafka_resp_err_t c = CommitOwned(at); c != RD_KAFKA_RESP_ERR_NO_ERROR)
          log(std::string("kafka: announcing ownership: ") + rd_kafka_err2str(c), "warn");
        {
          std::lock_guard lock(share_mu);
          for (int i = 0; i < parts->cnt; ++i) held_parts.push_back(parts->elems[i].partition);
          std::sort(held_parts.begin(), held_parts.end());
        }
        if (changelog->broken().empty()) SetNotReady("");
        RefreshOwners();
      }
    } else {
      // Revoked: what was read from them is applied before another instance takes them; what
      // cannot be applied now is dropped (the owner reads it again from the stored offsets).
      const bool applied = Flush();
      pending.clear();
      rows.clear();
      if (cooperative) {
        rd_kafka_error_destroy(rd_kafka_incremental_unassign(rk, parts));
        counters.partitions.fetch_sub(parts->cnt);
        if (!applied) Rewind();  // the partitions kept go back to their stored offsets too
      } else {
        rd_kafka_assign(rk, nullptr);
        counters.partitions.store(0);
      }
      log("kafka: " + std::to_string(parts->cnt) + " partition(s) revoked", "info");
    }
  }
};

KafkaSource::KafkaSource(Engine& engine, config::Kafka settings, IngestLimits limits, Log log)
    : impl_(std::make_unique<Impl>(engine, std::move(settings), limits, std::move(log))) {}

Status KafkaSource::Share(const std::string& owner) {
  impl_->owner_url = owner;
  impl_->changelog = std::make_unique<Changelog>(impl_->settings, impl_->log);
  if (Status started = impl_->changelog->Start(); !started) {
    impl_->changelog.reset();
    return started;
  }
  impl_->SetNotReady("waiting for partitions from the group");
  Changelog* changelog = impl_->changelog.get();
  impl_->engine.ShareSeries(
      [changelog](std::vector<ChangeRecord>&& records) { changelog->Publish(std::move(records)); });
  return Status::Ok();
}

void KafkaSource::SetOwner(const std::string& owner) {
  std::lock_guard lock(impl_->share_mu);
  impl_->owner_url = owner;
}

std::string KafkaSource::Owner() const {
  std::lock_guard lock(impl_->share_mu);
  return impl_->owner_url;
}

std::string KafkaSource::NotReady() const {
  if (!impl_->sharing()) return "";
  if (std::string broken = impl_->changelog->broken(); !broken.empty()) return broken;
  std::lock_guard lock(impl_->share_mu);
  return impl_->not_ready;
}

std::int32_t KafkaSource::PartitionOf(const std::string& key) const {
  std::int32_t n;
  {
    std::lock_guard lock(impl_->share_mu);
    n = impl_->partition_count;
  }
  if (n <= 0) return -1;
  return impl_->settings.partitioner == config::Kafka::Partitioner::kMurmur2
             ? rd_kafka_msg_partitioner_murmur2(nullptr, key.data(), key.size(), n, nullptr,
                                                nullptr)
             : rd_kafka_msg_partitioner_consistent(nullptr, key.data(), key.size(), n, nullptr,
                                                   nullptr);
}

std::vector<std::string> KafkaSource::Owners() const {
  std::lock_guard lock(impl_->share_mu);
  return impl_->owners;
}

std::vector<std::int32_t> KafkaSource::Assigned() const {
  std::lock_guard lock(impl_->share_mu);
  return impl_->held_parts;
}

const ChangelogCounters* KafkaSource::changelog_counters() const {
  return impl_->changelog ? &impl_->changelog->counters() : nullptr;
}

KafkaSource::~KafkaSource() {
  Stop();
}

Status KafkaSource::Start() {
  return impl_->Start();
}

void KafkaSource::Stop() {
  impl_->Stop();
}

const KafkaCounters& KafkaSource::counters() const {
  return impl_->counters;
}

}  // namespace forewarden
