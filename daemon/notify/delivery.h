// Delivery of alert events from the outbox (alert_book.h) to the configured sinks.
//
// One worker thread with its own connection to the store's database. Per sink, pending events
// go out strictly in event order: a sink whose oldest pending event is waiting for a retry
// gets nothing newer until it is through. At least once: an event is marked delivered only
// after the sink answered 2xx, so a crash between sending and marking sends it again; every
// message carries an idempotency key (installation id and event id) for receivers to drop
// repeats. A failed attempt is retried after initial_backoff * 2^(attempts-1), capped at
// max_backoff, times a jitter factor in [0.5, 1.5) (deterministic per event and attempt);
// after max_attempts the delivery is dead: visible in GET /v1/deliveries?state=dead and
// counted; POST /v1/deliveries/retry puts dead ones back.
//
// Sinks:
//   webhook       one POST per event, JSON body {"event_id", "idempotency_key", "kind", "at",
//                 "summary", "alert" | "group", ...}; signed on open standards: Content-Digest
//                 (RFC 9530, sha-256 of the exact body) and, with a secret, an HTTP Message
//                 Signature (RFC 9421, hmac-sha256) over the method, the target URI, the
//                 digest and the content type, with the created time and a key id; while a key
//                 rotates, a second signature with the previous key (README, "Webhook
//                 signatures"; deploy/webhook/receiver.py verifies them).
//   alertmanager  POST {url}/api/v2/alerts with the events of a round as one array; labels
//                 alertname (the rule), forewarden_alert (id), series, policy, rule, severity;
//                 annotations summary and url; resolved alerts carry endsAt. Alertmanager
//                 forgets alerts that are not re-sent, so open alerts are re-sent every
//                 resend_seconds with endsAt four intervals ahead. Acknowledge and snooze
//                 events have no Alertmanager counterpart and count as delivered.
//   log           one key=value line per event on standard error.
#pragma once

#include <atomic>
#include <condition_variable>
#include <cstdint>
#include <functional>
#include <map>
#include <memory>
#include <mutex>
#include <string>
#include <thread>
#include <vector>

#include "config/settings.h"
#include "daemon/common/status.h"

namespace forewarden {

struct SinkCounters {
  long delivered = 0;  // events
  long failed = 0;     // attempts that failed
  long dead = 0;       // deliveries given up
  long resent = 0;     // alertmanager re-sends of open alerts
};

class Delivery {
 public:
  using Clock = std::function<std::int64_t()>;  // ms since the epoch
  Delivery(std::shared_ptr<const config::Settings> settings, Clock clock);
  ~Delivery();

  Status Start();  // opens the database under server.data, starts the thread
  void Stop();     // finishes the send in progress; pending events stay
  void Notify();   // new events are waiting
  // New settings (a reload): invalid when a sink's secret cannot be read, and then nothing changes.
  Status Update(std::shared_ptr<const config::Settings> settings);

  // Thread-safe snapshots for metrics and tests.
  std::map<std::string, SinkCounters> counters() const;
  struct Backlog {
    long pending = 0;
    long dead = 0;
    std::int64_t oldest_pending_ms = 0;  // 0 when none
  };
  Backlog backlog() const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

// One signing key of a webhook sink.
struct SigningKey {
  std::string id;
  std::string secret;
};
// The Content-Digest header value of `body` (RFC 9530): sha-256=:BASE64:.
std::string ContentDigest(const std::string& body);
// Content-Digest, and with keys Signature-Input and Signature (RFC 9421, alg hmac-sha256;
// labels "forewarden" and, for a second key, "forewarden-previous") for a POST of `body`.
std::vector<std::pair<std::string, std::string>> SignatureHeaders(
    const std::string& target_uri, const std::string& content_type, const std::string& body,
    std::int64_t created_s, const std::vector<SigningKey>& keys);

}  // namespace forewarden
