#include "daemon/feeds/changelog.h"

#include <librdkafka/rdkafka.h>

#include <chrono>
#include <cstdlib>
#include <cstring>
#include <unordered_map>
#include <utility>

#include "daemon/common/log.h"

namespace forewarden {
namespace {

struct KafkaDeleter {
  void operator()(rd_kafka_t* rk) const {
    if (rk) rd_kafka_destroy(rk);
  }
};
using KafkaHandle = std::unique_ptr<rd_kafka_t, KafkaDeleter>;

// The header "through" of a series record: the partition's next offset at its commit.
constexpr const char* kThrough = "through";

}  // namespace

void ChangelogFold::Series(std::string key, std::string value, std::int64_t through) {
  if (through <= position_next_) {
    pending_.erase(key);
    committed_[std::move(key)] = std::move(value);
  } else {
    pending_[std::move(key)] = {std::move(value), through};
  }
}

void ChangelogFold::Position(std::string value) {
  const auto p = nlohmann::json::parse(value, nullptr, false);
  const nlohmann::json next = p.is_object() ? p.value("next", nlohmann::json()) : nlohmann::json();
  position_next_ = next.is_number_integer() ? next.get<std::int64_t>() : 0;
  position_ = std::move(value);
  for (auto it = pending_.begin(); it != pending_.end();) {
    if (it->second.second <= position_next_) {
      committed_[it->first] = std::move(it->second.first);
      it = pending_.erase(it);
    } else {
      ++it;
    }
  }
}

void ChangelogFold::Tombstone(const std::string& key) {
  committed_.erase(key);
  pending_.erase(key);
}

void ChangelogFold::Finish(ChangelogPartition& out) {
  out.records.reserve(committed_.size());
  for (auto& [key, value] : committed_) out.records.push_back(std::move(value));
  out.position = std::move(position_);
  out.left_out = static_cast<long>(pending_.size());
  committed_.clear();
  pending_.clear();
}

struct Changelog::Impl {
  config::Kafka settings;
  Log log;
  ChangelogCounters counters;
  KafkaHandle producer, reader;
  mutable std::mutex mu;
  std::string broken;    // guarded by mu
  bool stopped = false;  // Stop flushed once

  Impl(config::Kafka s, Log l) : settings(std::move(s)), log(std::move(l)) {}

  // The pass-through properties, then the changelog's own.
  rd_kafka_conf_t* Conf(const std::vector<std::pair<std::string, std::string>>& own,
                        const std::string& role, std::string& error) {
    rd_kafka_conf_t* conf = rd_kafka_conf_new();
    char why[512];
    bool compression = false;
    for (const auto& [k, v] : settings.properties) {
      if (k == "compression.type" || k == "compression.codec") compression = true;
      if (rd_kafka_conf_set(conf, k.c_str(), v.c_str(), why, sizeof why) != RD_KAFKA_CONF_OK) {
        error = "kafka.properties." + k + " (" + role + "): " + why;
        rd_kafka_conf_destroy(conf);
        return nullptr;
      }
    }
    std::vector<std::pair<std::string, std::string>> all = own;
    all.emplace_back("bootstrap.servers", settings.brokers);
    if (role == "changelog producer" && !compression) all.emplace_back("compression.type", "lz4");
    for (const auto& [k, v] : all)
      if (rd_kafka_conf_set(conf, k.c_str(), v.c_str(), why, sizeof why) != RD_KAFKA_CONF_OK) {
        error = "kafka (" + role + "): " + k + ": " + why;
        rd_kafka_conf_destroy(conf);
        return nullptr;
      }
    rd_kafka_conf_set_opaque(conf, this);
    rd_kafka_conf_set_log_cb(
        conf, [](const rd_kafka_t* rk, int level, const char* fac, const char* buf) {
          auto* self = static_cast<Impl*>(rd_kafka_opaque(rk));
          // the pass-through properties serve the consumer too: not a problem here
          if (KafkaPropertyScopeNote(buf)) return;
          if (self)
            self->log(std::string("kafka changelog: ") + fac + ": " + buf, SyslogLevel(level));
        });
    return conf;
  }

  Status Start() {
    std::string error;
    rd_kafka_conf_t* pconf =
        Conf({{"enable.idempotence", "true"}, {"message.timeout.ms", "0"}},  // retry until taken
             "changelog producer", error);
    if (!pconf) return Status::Invalid(error);
    rd_kafka_conf_set_dr_msg_cb(pconf, [](rd_kafka_t* rk, const rd_kafka_message_t* m, void*) {
      if (!m->err) return;
      auto* self = static_cast<Impl*>(rd_kafka_opaque(rk));
      self->counters.failed.fetch_add(1);
      self->Break(std::string("a changelog record was refused: ") + rd_kafka_err2str(m->err));
    });
    rd_kafka_conf_set_error_cb(pconf, [](rd_kafka_t* rk, int err, const char* reason, void*) {
      auto* self = static_cast<Impl*>(rd_kafka_opaque(rk));
      char fatal[512];
      if (err == RD_KAFKA_RESP_ERR__FATAL &&
          rd_kafka_fatal_error(rk, fatal, sizeof fatal) != RD_KAFKA_RESP_ERR_NO_ERROR)
        self->Break(std::string("the changelog producer failed: ") + fatal);
      else
        self->log(std::string("kafka changelog: ") + reason, "warn");
    });
    char why[512];
    producer.reset(rd_kafka_new(RD_KAFKA_PRODUCER, pconf, why, sizeof why));
    if (!producer) {
      rd_kafka_conf_destroy(pconf);
      return Status::Invalid(std::string("kafka: changelog producer: ") + why);
    }
    rd_kafka_conf_t* rconf = Conf({{"group.id", settings.group + ".changelog-reader"},
                                   {"enable.auto.commit", "false"},
                                   {"enable.auto.offset.store", "false"},
                                   {"auto.offset.reset", "earliest"},
                                   {"enable.partition.eof", "true"},
                                   // a restore reads to the end it saw: no waiting for more
                                   {"fetch.wait.max.ms", "10"}},
                                  "changelog reader", error);
    if (!rconf) return Status::Invalid(error);
    reader.reset(rd_kafka_new(RD_KAFKA_CONSUMER, rconf, why, sizeof why));
    if (!reader) {
      rd_kafka_conf_destroy(rconf);
      return Status::Invalid(std::string("kafka: changelog reader: ") + why);
    }
    rd_kafka_poll_set_consumer(reader.get());
    return Status::Ok();
  }

  void Break(const std::string& why) {
    {
      std::lock_guard lock(mu);
      if (!broken.empty()) return;
      broken = why;
    }
    log("kafka changelog: " + why + "; consumption stops (restart once the brokers take it)",
        "error");
  }

  void Publish(std::vector<ChangeRecord>&& records) {
    if (!producer) return;
    const std::string& topic = settings.changelog_topic;
    for (const ChangeRecord& r : records) {
      rd_kafka_headers_t* headers = rd_kafka_headers_new(1);
      if (r.key != kPositionKey) {
        const std::string through = std::to_string(r.through);
        rd_kafka_header_add(headers, kThrough, -1, through.data(),
                            static_cast<ssize_t>(through.size()));
      }
      for (;;) {
        const rd_kafka_resp_err_t err = rd_kafka_producev(
            producer.get(), RD_KAFKA_V_TOPIC(topic.c_str()), RD_KAFKA_V_PARTITION(r.partition),
            RD_KAFKA_V_KEY(r.key.data(), r.key.size()),
            RD_KAFKA_V_VALUE(const_cast<char*>(r.value.data()), r.value.size()),
            RD_KAFKA_V_MSGFLAGS(RD_KAFKA_MSG_F_COPY), RD_KAFKA_V_HEADERS(headers), RD_KAFKA_V_END);
        if (err == RD_KAFKA_RESP_ERR_NO_ERROR) {
          headers = nullptr;  // owned by the message now
          break;
        }
        if (err != RD_KAFKA_RESP_ERR__QUEUE_FULL) {
          counters.failed.fetch_add(1);
          Break(std::string("a changelog record could not be queued: ") + rd_kafka_err2str(err));
          break;
        }
        rd_kafka_poll(producer.get(), 100);  // wait for room
      }
      if (headers) rd_kafka_headers_destroy(headers);
      counters.records.fetch_add(1);
      counters.bytes.fetch_add(static_cast<long>(r.key.size() + r.value.size()));
    }
    rd_kafka_poll(producer.get(), 0);  // delivery reports
  }

  bool Drain(const std::atomic<bool>& stop) {
    if (!producer) return true;
    while (rd_kafka_flush(producer.get(), 500) != RD_KAFKA_RESP_ERR_NO_ERROR)
      if (stop.load() || !Broken().empty()) return false;
    return Broken().empty();
  }

  std::string Broken() const {
    std::lock_guard lock(mu);
    return broken;
  }

  Result<ChangelogPartition> Read(std::int32_t part, const std::atomic<bool>& stop) {
    const std::string& topic = settings.changelog_topic;
    const auto started = std::chrono::steady_clock::now();
    std::int64_t low = 0, high = 0;
    const rd_kafka_resp_err_t wm =
        rd_kafka_query_watermark_offsets(reader.get(), topic.c_str(), part, &low, &high, 10000);
    if (wm != RD_KAFKA_RESP_ERR_NO_ERROR)
      return Status::Io("changelog " + topic + " partition " + std::to_string(part) + ": " +
                        rd_kafka_err2str(wm));
    ChangelogPartition out;
    ChangelogFold fold;
    if (high > low) {
      rd_kafka_topic_partition_list_t* list = rd_kafka_topic_partition_list_new(1);
      rd_kafka_topic_partition_list_add(list, topic.c_str(), part)->offset = low;
      rd_kafka_assign(reader.get(), list);
      rd_kafka_topic_partition_list_destroy(list);
      std::int64_t at = low;
      while (at < high) {
        if (stop.load()) {
          rd_kafka_assign(reader.get(), nullptr);
          return Status::Io("stopping");
        }
        rd_kafka_message_t* m = rd_kafka_consumer_poll(reader.get(), 500);
        if (!m) continue;
        if (m->err == RD_KAFKA_RESP_ERR__PARTITION_EOF) {
          at = std::max(at, m->offset);
          rd_kafka_message_destroy(m);
          if (at >= high) break;
          continue;
        }
        if (m->err) {
          const std::string why = rd_kafka_message_errstr(m);
          rd_kafka_message_destroy(m);
          rd_kafka_assign(reader.get(), nullptr);
          return Status::Io("changelog " + topic + " partition " + std::to_string(part) + ": " +
                            why);
        }
        at = m->offset + 1;
        ++out.read;
        out.bytes += static_cast<long>(m->key_len + m->len);
        std::string key(static_cast<const char*>(m->key), m->key_len);
        std::string value(static_cast<const char*>(m->payload), m->len);
        if (key == kPositionKey) {
          fold.Position(std::move(value));
        } else if (m->payload) {
          std::int64_t through = 0;
          rd_kafka_headers_t* headers = nullptr;
          const void* h = nullptr;
          std::size_t hlen = 0;
          if (rd_kafka_message_headers(m, &headers) == RD_KAFKA_RESP_ERR_NO_ERROR &&
              rd_kafka_header_get_last(headers, kThrough, &h, &hlen) == RD_KAFKA_RESP_ERR_NO_ERROR)
            through =
                std::strtoll(std::string(static_cast<const char*>(h), hlen).c_str(), nullptr, 10);
          fold.Series(std::move(key), std::move(value), through);
        } else {
          fold.Tombstone(key);
        }
        rd_kafka_message_destroy(m);
      }
      rd_kafka_assign(reader.get(), nullptr);
    }
    fold.Finish(out);
    counters.restore_bytes.fetch_add(out.bytes);
    counters.restore_ms.fetch_add(
        static_cast<long>(std::chrono::duration_cast<std::chrono::milliseconds>(
                              std::chrono::steady_clock::now() - started)
                              .count()));
    return out;
  }
};

Changelog::Changelog(config::Kafka settings, Log log)
    : impl_(std::make_unique<Impl>(std::move(settings), std::move(log))) {}

Changelog::~Changelog() {
  Stop();
  // Records the brokers never took (all down at a stop) are given up rather than waited for
  // without end: the next owner applies their actuals again from the last position.
  if (impl_->producer)
    rd_kafka_purge(impl_->producer.get(), RD_KAFKA_PURGE_F_QUEUE | RD_KAFKA_PURGE_F_INFLIGHT);
}

Status Changelog::Start() {
  return impl_->Start();
}

void Changelog::Publish(std::vector<ChangeRecord>&& records) {
  impl_->Publish(std::move(records));
}

bool Changelog::Drain(const std::atomic<bool>& stop) {
  return impl_->Drain(stop);
}

Result<ChangelogPartition> Changelog::Read(std::int32_t part, const std::atomic<bool>& stop) {
  return impl_->Read(part, stop);
}

std::string Changelog::broken() const {
  return impl_->Broken();
}

const ChangelogCounters& Changelog::counters() const {
  return impl_->counters;
}

void Changelog::CountRestore(long partitions, long series, long ms) {
  impl_->counters.restored.fetch_add(series);
  impl_->counters.restores.fetch_add(partitions);
  impl_->counters.restore_ms.fetch_add(ms);
}

void Changelog::Stop() {
  // The producer stays until the destructor: the engine thread may still publish (it stops
  // after the Kafka source).
  if (impl_->producer && !impl_->stopped) rd_kafka_flush(impl_->producer.get(), 10000);
  impl_->stopped = true;
  if (impl_->reader) rd_kafka_consumer_close(impl_->reader.get());
  impl_->reader.reset();
}

}  // namespace forewarden
