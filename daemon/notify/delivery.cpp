#include "daemon/notify/delivery.h"

#include <librdkafka/rdkafka.h>
#include <openssl/evp.h>
#include <openssl/hmac.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <nlohmann/json.hpp>
#include <sstream>
#include <vector>

#include "daemon/common/iso_time.h"
#include "daemon/common/log.h"
#include "daemon/common/secret_text.h"
#include "daemon/http/http_client.h"
#include "daemon/store/alert_reads.h"
#include "daemon/store/outbox.h"

namespace forewarden {

using nlohmann::json;

namespace {

std::string Base64(const unsigned char* data, std::size_t n) {
  std::string out(4 * ((n + 2) / 3), '\0');
  const int len =
      EVP_EncodeBlock(reinterpret_cast<unsigned char*>(out.data()), data, static_cast<int>(n));
  out.resize(static_cast<std::size_t>(len));
  return out;
}

std::string HmacSha256Base64(const std::string& key, const std::string& data) {
  unsigned char mac[EVP_MAX_MD_SIZE];
  unsigned int len = 0;
  HMAC(EVP_sha256(), key.data(), static_cast<int>(key.size()),
       reinterpret_cast<const unsigned char*>(data.data()), data.size(), mac, &len);
  return Base64(mac, len);
}

}  // namespace

std::string ContentDigest(const std::string& body) {
  unsigned char md[EVP_MAX_MD_SIZE];
  unsigned int len = 0;
  EVP_Digest(body.data(), body.size(), md, &len, EVP_sha256(), nullptr);
  return "sha-256=:" + Base64(md, len) + ":";
}

std::vector<std::pair<std::string, std::string>> SignatureHeaders(
    const std::string& target_uri, const std::string& content_type, const std::string& body,
    std::int64_t created_s, const std::vector<SigningKey>& keys) {
  const std::string digest = ContentDigest(body);
  std::string inputs, signatures;
  for (std::size_t i = 0; i < keys.size(); ++i) {
    const std::string label = i == 0 ? "forewarden" : "forewarden-previous";
    const std::string params =
        "(\"@method\" \"@target-uri\" \"content-digest\" \"content-type\");created=" +
        std::to_string(created_s) + ";keyid=\"" + keys[i].id + "\";alg=\"hmac-sha256\"";
    const std::string base =
        "\"@method\": POST\n\"@target-uri\": " + target_uri + "\n\"content-digest\": " + digest +
        "\n\"content-type\": " + content_type + "\n\"@signature-params\": " + params;
    if (i) {
      inputs += ", ";
      signatures += ", ";
    }
    inputs += label + "=" + params;
    signatures += label + "=:" + HmacSha256Base64(keys[i].secret, base) + ":";
  }
  std::vector<std::pair<std::string, std::string>> out{{"Content-Digest", digest}};
  if (!keys.empty()) {
    out.emplace_back("Signature-Input", inputs);
    out.emplace_back("Signature", signatures);
  }
  return out;
}

namespace {

// Where a produced message's delivery result goes: one slot of a round's results, kept alive
// by every report that may still arrive.
struct KafkaReport {
  std::shared_ptr<std::vector<rd_kafka_resp_err_t>> results;
  std::size_t index = 0;
};

// A kafka sink's producer (idempotent: librdkafka retries without duplicates or reordering).
class KafkaProducer {
 public:
  static Result<std::shared_ptr<KafkaProducer>> Make(const config::Sink& s,
                                                     const config::Kafka& kafka) {
    rd_kafka_conf_t* conf = rd_kafka_conf_new();
    char why[512];
    std::vector<std::pair<std::string, std::string>> props = kafka.properties;
    props.emplace_back("bootstrap.servers", s.brokers);
    props.emplace_back("enable.idempotence", "true");
    props.emplace_back("message.timeout.ms", std::to_string(s.timeout_seconds * 1000));
    for (const auto& [k, v] : props)
      if (rd_kafka_conf_set(conf, k.c_str(), v.c_str(), why, sizeof why) != RD_KAFKA_CONF_OK) {
        rd_kafka_conf_destroy(conf);
        return Status::Invalid("sink " + s.name + ": " + k + ": " + why);
      }
    // librdkafka's own lines in the service's log format
    rd_kafka_conf_set_log_cb(
        conf, [](const rd_kafka_t* rk, int level, const char* fac, const char* buf) {
          const char* name = static_cast<const char*>(rd_kafka_opaque(rk));
          // kafka.properties serve the consumer too: a consumer property here is not a problem
          if (KafkaPropertyScopeNote(buf)) return;
          WriteLog(std::cerr,
                   LogLine(SyslogLevel(level), "kafka sink",
                           {{"sink", name ? name : ""}, {"what", std::string(fac) + ": " + buf}}));
        });
    // each message's result lands in its report (served by poll and flush, on the worker
    // thread); a report outlives a flush that gave up, so a late result writes nowhere stale
    rd_kafka_conf_set_dr_msg_cb(conf, [](rd_kafka_t*, const rd_kafka_message_t* m, void*) {
      auto* report = static_cast<KafkaReport*>(m->_private);
      if (!report) return;
      report->results->at(report->index) = m->err;
      delete report;
    });
    auto name = std::make_unique<std::string>(s.name);  // the log callback's opaque
    rd_kafka_conf_set_opaque(conf, const_cast<char*>(name->c_str()));
    rd_kafka_t* rk = rd_kafka_new(RD_KAFKA_PRODUCER, conf, why, sizeof why);
    if (!rk) {
      rd_kafka_conf_destroy(conf);
      return Status::Invalid("sink " + s.name + ": " + why);
    }
    return std::shared_ptr<KafkaProducer>(new KafkaProducer(rk, std::move(name)));
  }
  ~KafkaProducer() {
    rd_kafka_flush(rk_, 2000);
    rd_kafka_destroy(rk_);
  }
  KafkaProducer(const KafkaProducer&) = delete;
  KafkaProducer& operator=(const KafkaProducer&) = delete;
  rd_kafka_t* get() const { return rk_; }

 private:
  KafkaProducer(rd_kafka_t* rk, std::unique_ptr<std::string> name)
      : rk_(rk), name_(std::move(name)) {}
  rd_kafka_t* rk_;
  std::unique_ptr<std::string> name_;  // outlives rk_ (destroyed after it)
};

struct SinkConfig {
  config::Sink sink;
  std::vector<SigningKey>
      keys;  // the current key, then the previous one while rotating; never logged
  std::shared_ptr<KafkaProducer> kafka;  // kafka sinks
};

using Event = PendingDelivery;

bool ReadSecret(const config::Sink& s, const std::string& file, const std::string& env,
                std::string& secret, std::string& error) {
  Result<std::string> read = ReadSecretText(file, env, "sink " + s.name);
  if (!read) {
    error = read.status().message();
    return false;
  }
  secret = std::move(*read);
  if (secret.empty() && (!file.empty() || !env.empty())) {
    error = "sink " + s.name + ": the secret is empty";
    return false;
  }
  return true;
}

// The Alertmanager alert for an alert object of an event body.
json AmAlert(const json& alert, const std::string& severity, bool firing, std::int64_t now_ms,
             std::int64_t ends_ms) {
  json labels{{"alertname", alert.value("rule", "forewarden")},
              {"forewarden_alert", std::to_string(alert.value("id", 0))},
              {"series", alert.value("series", "")},
              {"policy", alert.value("policy", "")},
              {"rule", alert.value("rule", "")},
              {"severity", severity},
              {"service", "forewarden"}};
  json annotations{{"url", alert.value("url", "")}, {"page", alert.value("page_url", "")}};
  // what changed and what to do, as diagnosed when the alert opened
  if (const auto d = alert.find("diagnosis"); d != alert.end() && d->is_object())
    annotations["diagnosis"] = d->value("advice", "");
  json a{{"labels", labels},
         {"annotations", annotations},
         {"startsAt", alert.value("opened_at", IsoTime(now_ms))},
         {"endsAt", IsoTime(firing ? ends_ms : now_ms)},
         {"generatorURL", alert.value("page_url", alert.value("url", ""))}};
  return a;
}

json AmGroup(const json& group, bool firing, std::int64_t now_ms, std::int64_t ends_ms,
             const std::string& summary) {
  json labels{{"alertname", group.value("rule", "forewarden")},
              {"forewarden_group", std::to_string(group.value("id", 0))},
              {"series", std::to_string(group.value("series_count", 0)) + " series"},
              {"policy", group.value("policy", "")},
              {"rule", group.value("rule", "")},
              {"severity", group.value("severity", "warning")},
              {"service", "forewarden"}};
  return json{{"labels", labels},
              {"annotations", {{"summary", summary}, {"url", group.value("url", "")}}},
              {"endsAt", IsoTime(firing ? ends_ms : now_ms)},
              {"generatorURL", group.value("url", "")}};
}

}  // namespace

struct Delivery::Impl {
  std::shared_ptr<const config::Settings> settings;  // guarded by mu: a reload replaces it
  // The worker's own copy, taken under mu at the start of each round: the worker reads only
  // this one, so a reload (SIGHUP) never changes settings under its feet.
  std::shared_ptr<const config::Settings> active;
  Clock clock;
  std::vector<SinkConfig> sinks;
  Outbox outbox;  // every SQL statement of the worker lives there (store/outbox.h)
  Notifications notifications;
  bool round_failed = false;  // a mark of this round did not write: the round rolls back
  std::thread thread;
  mutable std::mutex mu;
  std::condition_variable wake;
  bool stop = false;
  bool notified = false;
  std::map<std::string, SinkCounters> counters;
  Backlog backlog;
  std::int64_t last_resend_ms = 0;
  std::string public_url;  // from the settings (guarded by mu), handed to `notifications` per round

  void Run();
  void Round(std::int64_t now);
  void Refresh();
  void Finish(const SinkConfig& s, const Event& e, const Status& sent, std::int64_t now);
  Status SendWebhook(const SinkConfig& s, const Event& e);
  Status SendAlertmanager(const SinkConfig& s, const std::vector<json>& notes);
  void SendKafka(const SinkConfig& s, const std::vector<Event>& events, std::int64_t now);
  void Resend(std::int64_t now);
};

Delivery::Delivery(std::shared_ptr<const config::Settings> settings, Clock clock)
    : impl_(std::make_unique<Impl>()) {
  impl_->settings = std::move(settings);
  impl_->clock = std::move(clock);
}

Delivery::~Delivery() {
  Stop();
}

Status Delivery::Update(std::shared_ptr<const config::Settings> settings) {
  std::string error;
  std::vector<SinkConfig> sinks;
  for (const config::Sink& s : settings->alerts.sinks) {
    SinkConfig c{s, {}, nullptr};
    if (s.kind == config::Sink::Kind::kKafka) {
      Result<std::shared_ptr<KafkaProducer>> made = KafkaProducer::Make(s, settings->kafka);
      if (!made) return made.status();
      c.kafka = std::move(*made);
    }
    std::string secret;
    if (!ReadSecret(s, s.secret_file, s.secret_env, secret, error)) return Status::Invalid(error);
    if (!secret.empty()) c.keys.push_back({s.key_id, secret});
    if (!s.previous_secret_file.empty()) {
      if (!ReadSecret(s, s.previous_secret_file, "", secret, error)) return Status::Invalid(error);
      c.keys.push_back({s.previous_key_id, secret});
    }
    sinks.push_back(std::move(c));
  }
  std::lock_guard lock(impl_->mu);
  impl_->settings = std::move(settings);
  impl_->sinks = std::move(sinks);
  impl_->public_url = PublicUrl(*impl_->settings);
  impl_->notified = true;
  impl_->wake.notify_all();
  return Status::Ok();
}

Status Delivery::Start() {
  Impl& m = *impl_;
  if (Status updated = Update(m.settings); !updated) return updated;
  if (Status opened = m.outbox.Open(m.settings->server.data); !opened) return opened;
  if (Status opened = m.notifications.Open(m.outbox.db(), m.outbox.install_id(), m.public_url);
      !opened)
    return opened;
  m.thread = std::thread([&m] { m.Run(); });
  return Status::Ok();
}

void Delivery::Stop() {
  {
    std::lock_guard lock(impl_->mu);
    impl_->stop = true;
  }
  impl_->wake.notify_all();
  if (impl_->thread.joinable()) impl_->thread.join();
}

void Delivery::Notify() {
  {
    std::lock_guard lock(impl_->mu);
    impl_->notified = true;
  }
  impl_->wake.notify_all();
}

std::map<std::string, SinkCounters> Delivery::counters() const {
  std::lock_guard lock(impl_->mu);
  return impl_->counters;
}

Delivery::Backlog Delivery::backlog() const {
  std::lock_guard lock(impl_->mu);
  return impl_->backlog;
}

void Delivery::Impl::Run() {
  for (;;) {
    {
      std::lock_guard lock(mu);
      active = settings;
    }
    const std::int64_t now = clock();
    Round(now);
    Resend(now);
    Refresh();
    std::int64_t due = outbox.NextDue().value_or(INT64_MAX);
    std::unique_lock lock(mu);
    const bool has_am = std::any_of(sinks.begin(), sinks.end(), [](const SinkConfig& s) {
      return s.sink.kind == config::Sink::Kind::kAlertmanager;
    });
    if (has_am) due = std::min(due, last_resend_ms + active->alerts.resend_seconds * 1000);
    const std::int64_t wait_ms = std::clamp<std::int64_t>(due - clock(), 0, 60000);
    wake.wait_for(lock, std::chrono::milliseconds(wait_ms), [this] { return stop || notified; });
    if (stop) return;
    notified = false;
  }
}

void Delivery::Impl::Refresh() {
  const OutboxBacklog b = outbox.Backlog();
  std::lock_guard lock(mu);
  backlog = Backlog{b.pending, b.dead, b.oldest_pending_ms};
}

void Delivery::Impl::Finish(const SinkConfig& s, const Event& e, const Status& sent,
                            std::int64_t now) {
  if (sent) {
    if (!outbox.MarkDelivered(e.event, s.sink.name, now)) round_failed = true;
    std::lock_guard lock(mu);
    ++counters[s.sink.name].delivered;
    return;
  }
  const config::Alerts& a = active->alerts;
  const int attempts = e.attempts + 1;
  const bool dead = attempts >= a.max_attempts;
  // deterministic jitter in [0.5, 1.5) from the event and attempt
  std::uint64_t h = static_cast<std::uint64_t>(e.event) * 0x9e3779b97f4a7c15ULL +
                    static_cast<std::uint64_t>(attempts);
  h ^= h >> 29;
  h *= 0xbf58476d1ce4e5b9ULL;
  h ^= h >> 32;
  const double jitter = 0.5 + static_cast<double>(h % 10000) / 10000.0;
  const double backoff =
      std::min(a.max_backoff_seconds, a.initial_backoff_seconds * std::pow(2.0, attempts - 1)) *
      jitter;
  if (!outbox.MarkFailed(e.event, s.sink.name, dead, attempts,
                         now + static_cast<std::int64_t>(backoff * 1000.0), sent.message()))
    round_failed = true;
  std::lock_guard lock(mu);
  ++counters[s.sink.name].failed;
  if (dead) ++counters[s.sink.name].dead;
}

Status Delivery::Impl::SendWebhook(const SinkConfig& s, const Event& e) {
  Result<json> note = notifications.Event(e.event);
  if (!note) return note.status();
  const std::string body = note->dump(-1, ' ', false, json::error_handler_t::replace);
  HttpHeaders headers;
  for (auto& [name, value] :
       SignatureHeaders(s.sink.url, "application/json", body, clock() / 1000, s.keys))
    headers.push_back({name, value});
  const HttpResult r = HttpPost(s.sink.url, "application/json", body, "",
                                std::chrono::seconds(s.sink.timeout_seconds), headers,
                                TlsClientOptions{s.sink.ca_file});
  if (r.status >= 200 && r.status < 300) return Status::Ok();
  return Status::Io(r.status ? "HTTP " + std::to_string(r.status) : r.error);
}

Status Delivery::Impl::SendAlertmanager(const SinkConfig& s, const std::vector<json>& notes) {
  const std::int64_t now = clock();
  const std::int64_t ends = now + 4 * active->alerts.resend_seconds * 1000;
  json list = json::array();
  for (const json& body : notes) {
    const std::string kind = body.value("kind", "");
    const std::string summary = body.value("summary", "");
    if (body.contains("alert")) {
      const json& alert = body["alert"];
      const std::string severity = alert.value("severity", "warning");
      if (kind == "opened" || kind == "escalated" || kind == "snooze_ended") {
        json a = AmAlert(alert, severity, true, now, ends);
        a["annotations"]["summary"] = summary;
        list.push_back(a);
        if (kind == "escalated" && body.contains("previous_severity"))
          list.push_back(
              AmAlert(alert, body["previous_severity"].get<std::string>(), false, now, ends));
      } else if (kind == "resolved") {
        json a = AmAlert(alert, severity, false, now, ends);
        a["annotations"]["summary"] = summary;
        list.push_back(a);
      }
    } else if (body.contains("group")) {
      list.push_back(AmGroup(body["group"], kind == "group_opened", now, ends, summary));
    }
  }
  if (list.empty()) return Status::Ok();  // acknowledgements and snoozes only
  std::string url = s.sink.url;
  while (!url.empty() && url.back() == '/') url.pop_back();
  const HttpResult r =
      HttpPost(url + "/api/v2/alerts", "application/json",
               list.dump(-1, ' ', false, json::error_handler_t::replace), "",
               std::chrono::seconds(s.sink.timeout_seconds), {}, TlsClientOptions{s.sink.ca_file});
  if (r.status >= 200 && r.status < 300) return Status::Ok();
  return Status::Io(r.status ? "HTTP " + std::to_string(r.status) + ": " + r.body.substr(0, 200)
                             : r.error);
}

// Produces the due events in order, keyed by alert (or group) id, and waits for the brokers'
// acknowledgements; events after the first one not acknowledged wait for the next round.
void Delivery::Impl::SendKafka(const SinkConfig& s, const std::vector<Event>& events,
                               std::int64_t now) {
  std::vector<Event> due;
  for (const Event& e : events)
    if (e.next_ms <= now) due.push_back(e);
  auto result =
      std::make_shared<std::vector<rd_kafka_resp_err_t>>(due.size(), RD_KAFKA_RESP_ERR__TIMED_OUT);
  std::vector<Status> status(due.size(), Status::Ok());
  rd_kafka_t* rk = s.kafka->get();
  for (std::size_t i = 0; i < due.size(); ++i) {
    Result<json> note = notifications.Event(due[i].event);
    if (!note) {
      status[i] = note.status();
      due.resize(i + 1);
      break;
    }
    const std::string key = note->contains("alert")
                                ? "alert-" + std::to_string((*note)["alert"].value("id", 0L))
                                : "group-" + std::to_string((*note)["group"].value("id", 0L));
    const std::string body = note->dump(-1, ' ', false, json::error_handler_t::replace);
    auto* report = new KafkaReport{result, i};
    const rd_kafka_resp_err_t err = rd_kafka_producev(
        rk, RD_KAFKA_V_TOPIC(s.sink.topic.c_str()), RD_KAFKA_V_KEY(key.data(), key.size()),
        RD_KAFKA_V_VALUE(const_cast<char*>(body.data()), body.size()),
        RD_KAFKA_V_MSGFLAGS(RD_KAFKA_MSG_F_COPY), RD_KAFKA_V_OPAQUE(report), RD_KAFKA_V_END);
    if (err != RD_KAFKA_RESP_ERR_NO_ERROR) {
      delete report;  // not queued: no result will come
      status[i] = Status::Io(std::string("kafka: ") + rd_kafka_err2str(err));
      due.resize(i + 1);
      break;
    }
  }
  // acknowledged or failed within the sink's timeout (message.timeout.ms)
  rd_kafka_flush(rk, static_cast<int>(s.sink.timeout_seconds * 1000 + 1000));
  for (std::size_t i = 0; i < due.size(); ++i) {
    Status sent = status[i];
    if (sent && (*result)[i] != RD_KAFKA_RESP_ERR_NO_ERROR)
      sent = Status::Io(std::string("kafka: ") + rd_kafka_err2str((*result)[i]));
    Finish(s, due[i], sent, clock());
    if (!sent) break;  // later events wait behind this one
  }
}

void Delivery::Impl::Round(std::int64_t now) {
  std::vector<SinkConfig> current;
  {
    std::lock_guard lock(mu);
    current = sinks;
    notifications.SetPublicUrl(public_url);
  }
  const long batch = active->alerts.batch;
  for (const SinkConfig& s : current) {
    Result<std::vector<Event>> pending = outbox.Pending(s.sink.name, batch);
    if (!pending) continue;
    const std::vector<Event>& events = *pending;
    if (events.empty() || events.front().next_ms > now) continue;  // strict order per sink
    // The engine holds the write lock during its commits; when it cannot be had now, the
    // events stay pending for the next round (nothing is sent outside a transaction).
    if (!outbox.Begin()) continue;
    round_failed = false;
    switch (s.sink.kind) {
      case config::Sink::Kind::kLog:
        for (const Event& e : events) {
          const Result<json> note = notifications.Event(e.event);
          if (note)
            WriteLog(std::cerr, LogLine("info", "alert",
                                        {{"event", std::to_string(e.event)},
                                         {"kind", e.kind},
                                         {"summary", note->value("summary", "")},
                                         {"page", note->contains("alert")
                                                      ? (*note)["alert"].value("page_url", "")
                                                      : std::string()}}));
          Finish(s, e, note.status(), now);
        }
        break;
      case config::Sink::Kind::kWebhook:
        for (const Event& e : events) {
          if (e.next_ms > now) break;
          const Status sent = SendWebhook(s, e);
          Finish(s, e, sent, clock());
          if (!sent) break;  // later events wait behind this one
        }
        break;
      case config::Sink::Kind::kKafka:
        SendKafka(s, events, now);
        break;
      case config::Sink::Kind::kAlertmanager: {
        std::vector<Event> due;
        std::vector<json> notes;
        Status sent;
        for (const Event& e : events)
          if (e.next_ms <= now) {
            due.push_back(e);
            Result<json> note = sent ? notifications.Event(e.event) : Result<json>(sent);
            if (!note) sent = note.status();
            notes.push_back(note ? std::move(*note) : json());
          }
        if (sent) sent = SendAlertmanager(s, notes);
        for (const Event& e : due) Finish(s, e, sent, clock());
        break;
      }
    }
    if (round_failed) {
      // a mark did not write: nothing of this round is kept, the events go again (at least once)
      const Status rolled = outbox.Rollback();
      WriteLog(std::cerr, LogLine("warn", "delivery round not recorded; its events go again",
                                  {{"sink", s.sink.name},
                                   {"why", rolled.ok() ? "a mark failed" : rolled.message()}}));
    } else if (Status committed = outbox.Commit(); !committed) {
      WriteLog(std::cerr, LogLine("warn", "delivery round not recorded; its events go again",
                                  {{"sink", s.sink.name}, {"why", committed.message()}}));
    }
  }
}

void Delivery::Impl::Resend(std::int64_t now) {
  std::vector<SinkConfig> am;
  {
    std::lock_guard lock(mu);
    for (const SinkConfig& s : sinks)
      if (s.sink.kind == config::Sink::Kind::kAlertmanager) am.push_back(s);
  }
  if (am.empty() || now - last_resend_ms < active->alerts.resend_seconds * 1000) return;
  last_resend_ms = now;
  // Open alerts re-sent as they are now; open groups as their opening.
  std::vector<json> events;
  std::vector<std::int64_t> ids, groups;
  ids = outbox.OpenAlerts();
  groups = outbox.OpenGroups();
  for (std::int64_t id : ids)
    if (Result<json> now_json = notifications.Current(id); now_json)
      events.push_back(std::move(*now_json));
  for (std::int64_t g : groups) {
    json note{{"kind", "group_opened"}};
    if (notifications.Group(g, "group_opened", note)) events.push_back(std::move(note));
  }
  if (events.empty()) return;
  for (const SinkConfig& s : am) {
    if (SendAlertmanager(s, events)) {
      std::lock_guard lock(mu);
      counters[s.sink.name].resent += static_cast<long>(events.size());
    }
  }
}

}  // namespace forewarden
