// forewarden settings as plain, validated structs. Produced by LoadSettings (load.h) from YAML;
// nothing outside config/ sees yaml-cpp. Immutable once loaded: share freely between threads.
#pragma once

#include <string>
#include <utility>
#include <vector>

#include "monitors/period.h"
#include "monitors/series.h"

namespace config {

// Which series a policy takes: a glob on the series key ('*' any run of characters, '/'
// included; '?' one character) and, optionally, labels that must all be present and equal.
struct Match {
  std::string key = "*";
  std::vector<std::pair<std::string, std::string>> labels;
};

// A limit derived from a false-alarm budget (monitors/calibrate.h).
struct RuleCalibration {
  std::string rule;
  double every = 0.0;                     // periods per false alert per series, as configured
  double limit = 0.0;                     // derived
  double rate = 0.0;                      // episodes per period at that limit, in the simulation
  double per_series_week = 0.0;           // expected false alerts per series per week
  std::vector<monitors::AgeLimit> young;  // derived limits of young series (rule.h)
  std::vector<double> young_rates;        // episodes per period in each young band
};

struct Policy {
  std::string name;
  Match match;
  monitors::PeriodKind period = monitors::PeriodKind::kWeek;
  monitors::PolicySpec spec;
  int history = 104;    // actuals kept per series for restatements and charts
  int stale_after = 2;  // periods an actual may be overdue before the series is stale
  // /metrics exports this many series with the largest |Trigg's signal| by key (0: none;
  // each costs two time series in Prometheus).
  int export_top_series = 0;
  std::vector<RuleCalibration> calibrations;  // rules with a false_alert_every budget
};

// Where alert notifications go (`alerts.sinks`).
struct Sink {
  enum class Kind { kWebhook, kAlertmanager, kLog, kKafka };
  std::string name;
  Kind kind = Kind::kLog;
  std::string url;                    // webhook: the endpoint; alertmanager: its base URL
  std::string secret_file;            // webhook: HMAC-SHA256 key, read from this file...
  std::string secret_env;             // ...or this environment variable
  std::string key_id = "forewarden";  // the keyid the signature names
  std::string ca_file;  // https:// URLs: a CA (PEM) trusted besides the system's store
  // Key rotation: while set, each message carries a second signature with the previous key.
  std::string previous_secret_file;
  std::string previous_key_id;
  long timeout_seconds = 10;
  // kafka: events produced to this topic, keyed by alert (or group) id, through these brokers
  // (default: kafka.brokers) with kafka.properties
  std::string topic;
  std::string brokers;
};

// Alert lifecycle and delivery (`alerts:`); all optional.
struct Alerts {
  // More than this many series of one policy opening the same rule in one batch make one
  // grouped notification instead of one each (0: never group).
  long storm_threshold = 25;
  std::vector<Sink> sinks;  // default: one log sink
  long max_attempts = 20;   // deliveries of an event to a sink before it is dead-lettered
  double initial_backoff_seconds = 1.0;
  double max_backoff_seconds = 600.0;
  long batch = 100;          // events sent in one round per sink
  long resend_seconds = 60;  // alertmanager: open alerts are re-sent this often
  long check_seconds = 30;   // how often ended snoozes and stale rules are checked
  std::string public_url;    // base URL of this service in notifications ("" = from listen)
};

enum class Synchronous { kFull, kNormal };

// The service's settings (`server:`); all optional. Which ones apply on reload is listed in
// the README ("Settings that apply without a restart").
struct Server {
  std::string listen = "127.0.0.1:8700";
  std::string data = "./forewarden-data";
  std::string token_file;        // bearer token for write endpoints, read from this file...
  std::string token_env;         // ...or from this environment variable
  std::string people_file;       // one line per person: NAME ROLE SHA256-OF-TOKEN (api/access.h)
  bool token_for_reads = false;  // reads need a token too (any role)
  std::string tls_cert_file;  // the listener over TLS: certificate chain (PEM), reloaded on SIGHUP
  std::string tls_key_file;   // ...and its private key (PEM)
  bool tls_terminated_by_proxy =
      false;  // a proxy in front terminates TLS for a non-loopback listener
  Synchronous synchronous = Synchronous::kFull;
  long max_body_bytes = 16 << 20;
  long max_rows_per_batch = 200000;
  long max_key_bytes = 256;    // a series key
  long max_labels = 16;        // labels on one row
  long max_label_bytes = 256;  // a label's name and its value, each
  long max_series =
      10000000;  // series the service holds; a row of a new series beyond it is refused
  long max_connections = 256;
  long header_timeout_seconds = 10;
  long idle_timeout_seconds = 60;
  long queue_depth = 64;       // batches waiting for the engine
  long read_queue_depth = 64;  // list requests waiting for the API's reader thread
  long max_exports = 2;        // forecast exports (GET /v1/forecasts) running at once
  long shutdown_grace_seconds = 10;
  long long max_database_bytes = 0;    // cap on the database file (0 = none); over it writes fail
  long long cache_bytes = 64LL << 20;  // SQLite page cache
  // Series states are written with the batch that changes them only when needed (new series,
  // restatements, trimming); otherwise at most this many seconds or dirty series later (the
  // actuals themselves are always committed with their batch; a restart replays the rest).
  long state_flush_seconds = 5;
  long state_flush_series = 100000;
  std::string folder;  // drop folder ("" = none): incoming files, done/, rejected/
  long folder_poll_ms = 500;
};

// Actuals from Kafka topics (`kafka:`; daemon/feeds/kafka_source.h). Off while brokers is "".
struct Kafka {
  std::string brokers;              // bootstrap servers, "host:port,host:port"
  std::vector<std::string> topics;  // consumed in one consumer group
  std::string group = "forewarden";
  enum class Format { kCsv, kNdjson };
  Format format = Format::kCsv;   // csv: lines "series,period,value"; ndjson: objects
  std::string dead_letter_topic;  // bad rows go there with the problem ("" = log and count only)
  long batch_rows = 5000;         // rows applied in one engine batch, at most
  long batch_ms = 200;            // how long a batch may wait to fill
  // librdkafka properties passed through (security.protocol, sasl.*, ssl.*, ...)
  std::vector<std::pair<std::string, std::string>> properties;
  // Several instances share the series (daemon/feeds/changelog.h): the compacted topic each
  // partition's owner writes its series to ("" = one instance holds every series).
  std::string changelog_topic;
  // How producers place a series key in a partition (to find the instance holding a series
  // never seen here): murmur2 (Java clients' default) or crc32 (librdkafka's "consistent").
  enum class Partitioner { kMurmur2, kCrc32 };
  Partitioner partitioner = Partitioner::kMurmur2;
};

struct Settings {
  std::vector<Policy> policies;  // first match wins
  std::string fallback_policy;   // taken by series no policy matches ("" = reject them)
  Server server;
  Alerts alerts;
  Kafka kafka;
};

// True when `key` matches the glob `pattern`.
bool GlobMatch(std::string_view pattern, std::string_view key);

// The first policy whose match fits the key and labels, else the fallback policy, or nullptr.
const Policy* FindPolicy(const Settings& settings, std::string_view key,
                         const std::vector<std::pair<std::string, std::string>>& labels = {});

}  // namespace config
