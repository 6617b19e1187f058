// Prometheus metrics of `forewarden serve` (GET /metrics), built with prometheus-cpp core and
// serialised with its TextSerializer. Names start with forewarden_, carry base units and
// counters end in _total; labels come from small fixed sets (policy, rule, severity, state,
// result, sink, outcome, route, code, reason, kind) and never name a series, except the
// opt-in forewarden_series_signal of a policy's `export_top_series`.
//
// Histograms observed as things happen live in a registry kept for the process; everything
// else is read at scrape time from the engine (a snapshot on its thread), the HTTP server,
// the API, the drop folder, the delivery worker and /proc, into a registry built per scrape.
// The README's metrics table lists every name; a test keeps it in sync.
#pragma once

#include <atomic>
#include <memory>
#include <string>

#include "daemon/engine/engine.h"

namespace prometheus {
class Registry;
class Histogram;
template <typename T>
class Family;
class Counter;
}  // namespace prometheus

namespace forewarden {

struct HttpCounters;
struct DropFolderCounters;
struct KafkaCounters;
class Delivery;

// What the API refused, by reason (kept by the API, read at scrape time).
struct ApiCounters {
  std::atomic<long> rejected_unauthorized{0};
  std::atomic<long> rejected_forbidden{0};  // a known token whose role does not allow the route
  std::atomic<long> rejected_media_type{0};
  std::atomic<long> rejected_bad_input{0};
  std::atomic<long> rejected_too_many_rows{0};
  std::atomic<long> rejected_queue_full{0};
  std::atomic<long> rejected_read_queue_full{0};  // lists refused at server.read_queue_depth
  std::atomic<long> rejected_unavailable{0};
  std::atomic<long> rejected_exports_busy{0};  // exports refused at server.max_exports
  std::atomic<long> exports_complete{0};       // GET /v1/forecasts bodies sent whole
  std::atomic<long> exports_cut{0};            // ... cut short (the client went, or a stop)
  std::atomic<long> export_rows{0};            // forecast rows sent by exports
  std::atomic<long> rejected_rows{0};  // rows of batches refused before the engine (bad input)
  std::atomic<long> rejected_batches{0};
  std::atomic<long> internal_errors{0};  // handlers that threw: answered 500
};

// Where scrape-time values come from; any pointer may be null (not running).
struct ChangelogCounters;
struct MetricSources {
  const Engine* engine = nullptr;
  const HttpCounters* http = nullptr;
  const ApiCounters* api = nullptr;
  const DropFolderCounters* folder = nullptr;
  const Delivery* delivery = nullptr;
  const std::atomic<long>* reloads_ok = nullptr;
  const std::atomic<long>* reloads_failed = nullptr;
  const KafkaCounters* kafka = nullptr;
  const ChangelogCounters* changelog = nullptr;  // instances sharing series
};

class Metrics {
 public:
  Metrics();
  ~Metrics();

  // Thread-safe observations.
  void ObserveBatch(std::size_t rows, double receive_to_commit_seconds);
  void ObserveCommit(double seconds);
  // `route` from a fixed set (Api's route names); `code` the HTTP status.
  void CountRequest(const std::string& route, int code);

  void SetSources(const MetricSources& sources);
  // The exposition text (Prometheus text format 0.0.4). Engine thread (reads the snapshot).
  std::string Render(const EngineSnapshot& snapshot) const;

 private:
  std::shared_ptr<prometheus::Registry> live_;
  prometheus::Histogram* batch_rows_;
  prometheus::Histogram* ingest_latency_;
  prometheus::Histogram* commit_duration_;
  prometheus::Family<prometheus::Counter>* requests_;
  MetricSources sources_;
};

// Process figures from /proc/self (prometheus-cpp core has no process collector).
struct ProcessFigures {
  double cpu_seconds = 0;
  double resident_bytes = 0;
  double open_fds = 0;
  double start_time_seconds = 0;  // since the epoch
};
ProcessFigures ReadProcessFigures();

}  // namespace forewarden
