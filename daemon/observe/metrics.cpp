#include "daemon/observe/metrics.h"

#include <prometheus/counter.h>
#include <prometheus/family.h>
#include <prometheus/gauge.h>
#include <prometheus/histogram.h>
#include <prometheus/registry.h>
#include <prometheus/text_serializer.h>
#include <unistd.h>

#include <cstdio>
#include <cstring>
#include <ctime>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "daemon/feeds/changelog.h"
#include "daemon/feeds/drop_folder.h"
#include "daemon/feeds/kafka_source.h"
#include "daemon/http/http_server.h"
#include "daemon/notify/delivery.h"

#ifndef FOREWARDEN_VERSION
#define FOREWARDEN_VERSION "dev"
#endif

namespace forewarden {

using prometheus::BuildCounter;
using prometheus::BuildGauge;
using prometheus::BuildHistogram;

ProcessFigures ReadProcessFigures() {
  ProcessFigures f;
  const double ticks = static_cast<double>(sysconf(_SC_CLK_TCK));
  // /proc/self/stat: fields after the parenthesised command; utime 14, stime 15, starttime 22
  std::ifstream stat("/proc/self/stat");
  std::string line;
  if (std::getline(stat, line)) {
    const std::size_t close = line.rfind(')');
    if (close != std::string::npos) {
      std::istringstream rest(line.substr(close + 2));
      std::string field;
      std::vector<std::string> fields;
      while (rest >> field) fields.push_back(field);
      // fields[0] is field 3 (state)
      if (fields.size() > 19) {
        f.cpu_seconds = (std::stod(fields[11]) + std::stod(fields[12])) / ticks;
        double boot = 0;
        std::ifstream s("/proc/stat");
        std::string key;
        while (s >> key) {
          if (key == "btime") {
            s >> boot;
            break;
          }
          std::getline(s, key);
        }
        f.start_time_seconds = boot + std::stod(fields[19]) / ticks;
      }
    }
  }
  std::ifstream statm("/proc/self/statm");
  double size = 0, resident = 0;
  if (statm >> size >> resident)
    f.resident_bytes = resident * static_cast<double>(sysconf(_SC_PAGESIZE));
  std::error_code ec;
  long fds = 0;
  for (auto it = std::filesystem::directory_iterator("/proc/self/fd", ec);
       !ec && it != std::filesystem::directory_iterator(); it.increment(ec))
    ++fds;
  f.open_fds = static_cast<double>(fds > 0 ? fds - 1 : 0);  // minus the directory iterator's own
  return f;
}

Metrics::Metrics() : live_(std::make_shared<prometheus::Registry>()) {
  batch_rows_ = &BuildHistogram()
                     .Name("forewarden_batch_rows")
                     .Help("Rows per accepted ingest batch (HTTP).")
                     .Register(*live_)
                     .Add({}, prometheus::Histogram::BucketBoundaries{1, 10, 100, 1000, 5000, 10000,
                                                                      50000, 200000});
  ingest_latency_ =
      &BuildHistogram()
           .Name("forewarden_ingest_latency_seconds")
           .Help("From a batch's request body received to its commit acknowledged.")
           .Register(*live_)
           .Add({}, prometheus::Histogram::BucketBoundaries{0.001, 0.0025, 0.005, 0.01, 0.025, 0.05,
                                                            0.1, 0.25, 0.5, 1, 2.5, 5, 10});
  commit_duration_ =
      &BuildHistogram()
           .Name("forewarden_commit_duration_seconds")
           .Help("SQLite commit of one group of batches.")
           .Register(*live_)
           .Add({}, prometheus::Histogram::BucketBoundaries{0.0005, 0.001, 0.0025, 0.005, 0.01,
                                                            0.025, 0.05, 0.1, 0.25, 0.5, 1});
  requests_ = &BuildCounter()
                   .Name("forewarden_http_requests_total")
                   .Help("HTTP requests answered, by route and status code.")
                   .Register(*live_);
}

Metrics::~Metrics() = default;

void Metrics::ObserveBatch(std::size_t rows, double seconds) {
  batch_rows_->Observe(static_cast<double>(rows));
  ingest_latency_->Observe(seconds);
}

void Metrics::ObserveCommit(double seconds) {
  commit_duration_->Observe(seconds);
}

void Metrics::CountRequest(const std::string& route, int code) {
  requests_->Add({{"route", route}, {"code", std::to_string(code)}}).Increment();
}

void Metrics::SetSources(const MetricSources& sources) {
  sources_ = sources;
}

namespace {

std::string Bound(double v) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%g", v);
  return buf;
}

}  // namespace

std::string Metrics::Render(const EngineSnapshot& snap) const {
  prometheus::Registry now;
  const MetricSources& src = sources_;
  BuildGauge()
      .Name("forewarden_build_info")
      .Help("Always 1; the version in a label.")
      .Register(now)
      .Add({{"version", FOREWARDEN_VERSION}})
      .Set(1);

  const ProcessFigures proc = ReadProcessFigures();
  BuildCounter()
      .Name("forewarden_process_cpu_seconds_total")
      .Help("User and system CPU time of the process.")
      .Register(now)
      .Add({})
      .Increment(proc.cpu_seconds);
  BuildGauge()
      .Name("forewarden_process_resident_memory_bytes")
      .Help("Resident memory of the process.")
      .Register(now)
      .Add({})
      .Set(proc.resident_bytes);
  BuildGauge()
      .Name("forewarden_process_open_fds")
      .Help("Open file descriptors.")
      .Register(now)
      .Add({})
      .Set(proc.open_fds);
  BuildGauge()
      .Name("forewarden_process_start_time_seconds")
      .Help("Start time of the process since the Unix epoch.")
      .Register(now)
      .Add({})
      .Set(proc.start_time_seconds);

  if (const Engine* e = src.engine) {
    const EngineCounters& c = e->counters();
    auto& actuals = BuildCounter()
                        .Name("forewarden_actuals_total")
                        .Help("Actuals received, by result (rejected: rows of refused batches).")
                        .Register(now);
    actuals.Add({{"result", "applied"}}).Increment(static_cast<double>(c.applied.load()));
    actuals.Add({{"result", "unchanged"}}).Increment(static_cast<double>(c.unchanged.load()));
    actuals.Add({{"result", "restated"}}).Increment(static_cast<double>(c.restated.load()));
    const long api_rows = src.api ? src.api->rejected_rows.load() : 0;
    const long api_batches = src.api ? src.api->rejected_batches.load() : 0;
    actuals.Add({{"result", "rejected"}})
        .Increment(static_cast<double>(c.rejected_rows.load() + api_rows));
    auto& batches = BuildCounter()
                        .Name("forewarden_batches_total")
                        .Help("Ingest batches, by result.")
                        .Register(now);
    batches.Add({{"result", "committed"}}).Increment(static_cast<double>(c.batches_ok.load()));
    batches.Add({{"result", "rejected"}})
        .Increment(static_cast<double>(c.batches_rejected.load() + api_batches));
    batches.Add({{"result", "unavailable"}})
        .Increment(static_cast<double>(c.batches_unavailable.load()));
    BuildCounter()
        .Name("forewarden_series_refused_total")
        .Help("Rows of new series refused because the service holds server.max_series series.")
        .Register(now)
        .Add({})
        .Increment(static_cast<double>(c.series_refused.load()));
    auto& transitions = BuildCounter()
                            .Name("forewarden_alert_transitions_total")
                            .Help(
                                "Alert changes recorded with ingest, by kind (hand changes are in "
                                "the alert history).")
                            .Register(now);
    transitions.Add({{"kind", "opened"}}).Increment(static_cast<double>(c.alerts_opened.load()));
    transitions.Add({{"kind", "escalated"}})
        .Increment(static_cast<double>(c.alerts_escalated.load()));
    transitions.Add({{"kind", "resolved"}})
        .Increment(static_cast<double>(c.alerts_resolved.load()));
    transitions.Add({{"kind", "grouped"}}).Increment(static_cast<double>(c.alerts_grouped.load()));
    BuildGauge()
        .Name("forewarden_engine_queue_depth")
        .Help("Batches and jobs waiting for the engine.")
        .Register(now)
        .Add({})
        .Set(static_cast<double>(e->queue_depth()));
    BuildGauge()
        .Name("forewarden_engine_queue_capacity")
        .Help("server.queue_depth: beyond it ingest answers 503.")
        .Register(now)
        .Add({})
        .Set(static_cast<double>(snap.queue_capacity));
    BuildGauge()
        .Name("forewarden_store_failed")
        .Help("1 while the store's sticky failure holds (restart needed), else 0.")
        .Register(now)
        .Add({})
        .Set(e->failure().empty() ? 0 : 1);
  }

  auto& series = BuildGauge()
                     .Name("forewarden_series")
                     .Help("Series by policy and state (ok, alerting, stale, warming).")
                     .Register(now);
  auto& trigg =
      BuildGauge()
          .Name("forewarden_portfolio_abs_trigg_signal_series")
          .Help("Series of a policy whose |Trigg's signal| is at most `at_most` (past warm-up).")
          .Register(now);
  auto& cusum = BuildGauge()
                    .Name("forewarden_portfolio_abs_cusum_signal_series")
                    .Help(
                        "Series of a policy whose |cumulative signal| (MADs) is at most `at_most` "
                        "(past warm-up).")
                    .Register(now);
  auto& bias = BuildGauge()
                   .Name("forewarden_portfolio_bias_ratio")
                   .Help(
                       "Sum of errors over sum of actuals in the policy's newest period (positive: "
                       "under-forecast).")
                   .Register(now);
  auto& last = BuildGauge()
                   .Name("forewarden_last_actual_timestamp_seconds")
                   .Help(
                       "When the policy's last actual was committed (since the Unix epoch; absent "
                       "until one arrives).")
                   .Register(now);
  prometheus::Family<prometheus::Gauge>* top = nullptr;
  for (const PolicyHealth& h : snap.policies) {
    for (int k = 0; k < 4; ++k)
      series.Add({{"policy", h.policy}, {"state", StatusName(static_cast<SeriesStatus>(k))}})
          .Set(static_cast<double>(h.series[k]));
    for (std::size_t k = 0; k < h.trigg_at_most.size(); ++k)
      trigg
          .Add({{"policy", h.policy},
                {"at_most", k < std::size(kTriggBounds) ? Bound(kTriggBounds[k]) : "+Inf"}})
          .Set(static_cast<double>(h.trigg_at_most[k]));
    for (std::size_t k = 0; k < h.cusum_at_most.size(); ++k)
      cusum
          .Add({{"policy", h.policy},
                {"at_most", k < std::size(kCusumBounds) ? Bound(kCusumBounds[k]) : "+Inf"}})
          .Set(static_cast<double>(h.cusum_at_most[k]));
    if (h.has_bias) bias.Add({{"policy", h.policy}}).Set(h.bias);
    if (h.last_actual_ms)
      last.Add({{"policy", h.policy}}).Set(static_cast<double>(h.last_actual_ms) / 1000.0);
    if (!h.top.empty() && !top)
      top = &BuildGauge()
                 .Name("forewarden_series_signal")
                 .Help(
                     "Signals of the series with the largest |Trigg's signal| of policies with "
                     "export_top_series.")
                 .Register(now);
    for (const PolicyHealth::Top& t : h.top) {
      top->Add({{"policy", h.policy}, {"series", t.key}, {"signal", "trigg"}}).Set(t.trigg);
      top->Add({{"policy", h.policy}, {"series", t.key}, {"signal", "cusum"}}).Set(t.cusum);
    }
  }
  auto& alerts = BuildGauge()
                     .Name("forewarden_alerts")
                     .Help(
                         "Unresolved alerts by policy, rule, severity and state (open, "
                         "acknowledged, snoozed).")
                     .Register(now);
  for (const AlertTally& t : snap.alerts)
    alerts
        .Add({{"policy", t.policy}, {"rule", t.rule}, {"severity", t.severity}, {"state", t.state}})
        .Set(static_cast<double>(t.count));

  if (const Delivery* d = src.delivery) {
    auto& deliveries = BuildCounter()
                           .Name("forewarden_deliveries_total")
                           .Help(
                               "Alert event deliveries by sink and outcome (failed: attempts that "
                               "failed; dead: given up).")
                           .Register(now);
    auto& resent = BuildCounter()
                       .Name("forewarden_alertmanager_resent_total")
                       .Help("Open alerts re-sent to Alertmanager sinks.")
                       .Register(now);
    for (const auto& [sink, c] : d->counters()) {
      deliveries.Add({{"sink", sink}, {"outcome", "delivered"}})
          .Increment(static_cast<double>(c.delivered));
      deliveries.Add({{"sink", sink}, {"outcome", "failed"}})
          .Increment(static_cast<double>(c.failed));
      deliveries.Add({{"sink", sink}, {"outcome", "dead"}}).Increment(static_cast<double>(c.dead));
      if (c.resent) resent.Add({{"sink", sink}}).Increment(static_cast<double>(c.resent));
    }
    const Delivery::Backlog b = d->backlog();
    BuildGauge()
        .Name("forewarden_outbox_pending_deliveries")
        .Help("Deliveries waiting to be sent (all sinks).")
        .Register(now)
        .Add({})
        .Set(static_cast<double>(b.pending));
    BuildGauge()
        .Name("forewarden_outbox_dead_deliveries")
        .Help("Deliveries given up after max_attempts.")
        .Register(now)
        .Add({})
        .Set(static_cast<double>(b.dead));
    const double age = b.oldest_pending_ms
                           ? std::max(0.0, static_cast<double>(std::time(nullptr)) -
                                               static_cast<double>(b.oldest_pending_ms) / 1000.0)
                           : 0.0;
    BuildGauge()
        .Name("forewarden_outbox_oldest_pending_age_seconds")
        .Help("Age of the oldest undelivered event (0: none).")
        .Register(now)
        .Add({})
        .Set(age);
  }

  auto& rejections = BuildCounter()
                         .Name("forewarden_http_rejections_total")
                         .Help("Requests and connections refused, by reason.")
                         .Register(now);
  if (const HttpCounters* h = src.http) {
    rejections.Add({{"reason", "body_too_large"}})
        .Increment(static_cast<double>(h->body_too_large.load()));
    rejections.Add({{"reason", "too_many_connections"}})
        .Increment(static_cast<double>(h->too_many_connections.load()));
    rejections.Add({{"reason", "timeout"}}).Increment(static_cast<double>(h->timeouts.load()));
    rejections.Add({{"reason", "malformed"}}).Increment(static_cast<double>(h->malformed.load()));
    rejections.Add({{"reason", "tls_handshake"}})
        .Increment(static_cast<double>(h->tls_failed.load()));
    BuildGauge()
        .Name("forewarden_http_connections")
        .Help("Open HTTP connections.")
        .Register(now)
        .Add({})
        .Set(static_cast<double>(h->connections.load()));
  }
  if (const ApiCounters* a = src.api) {
    BuildCounter()
        .Name("forewarden_http_internal_errors_total")
        .Help(
            "Requests answered 500 because a handler failed unexpectedly (logged with the request "
            "line).")
        .Register(now)
        .Add({})
        .Increment(static_cast<double>(a->internal_errors.load()));
    rejections.Add({{"reason", "unauthorized"}})
        .Increment(static_cast<double>(a->rejected_unauthorized.load()));
    rejections.Add({{"reason", "forbidden"}})
        .Increment(static_cast<double>(a->rejected_forbidden.load()));
    rejections.Add({{"reason", "media_type"}})
        .Increment(static_cast<double>(a->rejected_media_type.load()));
    rejections.Add({{"reason", "bad_input"}})
        .Increment(static_cast<double>(a->rejected_bad_input.load()));
    rejections.Add({{"reason", "too_many_rows"}})
        .Increment(static_cast<double>(a->rejected_too_many_rows.load()));
    rejections.Add({{"reason", "queue_full"}})
        .Increment(static_cast<double>(a->rejected_queue_full.load()));
    rejections.Add({{"reason", "read_queue_full"}})
        .Increment(static_cast<double>(a->rejected_read_queue_full.load()));
    rejections.Add({{"reason", "unavailable"}})
        .Increment(static_cast<double>(a->rejected_unavailable.load()));
    rejections.Add({{"reason", "exports_busy"}})
        .Increment(static_cast<double>(a->rejected_exports_busy.load()));
    auto& exports = BuildCounter()
                        .Name("forewarden_exports_total")
                        .Help(
                            "Forecast exports (GET /v1/forecasts) by outcome: complete, or cut "
                            "short when the client went away or the service stopped.")
                        .Register(now);
    exports.Add({{"outcome", "complete"}})
        .Increment(static_cast<double>(a->exports_complete.load()));
    exports.Add({{"outcome", "cut"}}).Increment(static_cast<double>(a->exports_cut.load()));
    BuildCounter()
        .Name("forewarden_export_rows_total")
        .Help("Forecast rows (one series, one period ahead) sent by exports.")
        .Register(now)
        .Add({})
        .Increment(static_cast<double>(a->export_rows.load()));
  }
  if (src.reloads_ok && src.reloads_failed) {
    auto& reloads = BuildCounter()
                        .Name("forewarden_config_reloads_total")
                        .Help("Settings reloads (SIGHUP) by result.")
                        .Register(now);
    reloads.Add({{"result", "applied"}}).Increment(static_cast<double>(src.reloads_ok->load()));
    reloads.Add({{"result", "refused"}}).Increment(static_cast<double>(src.reloads_failed->load()));
  }
  if (const DropFolderCounters* f = src.folder) {
    auto& files = BuildCounter()
                      .Name("forewarden_drop_folder_files_total")
                      .Help("Drop-folder files by result.")
                      .Register(now);
    files.Add({{"result", "done"}}).Increment(static_cast<double>(f->done.load()));
    files.Add({{"result", "rejected"}}).Increment(static_cast<double>(f->rejected.load()));
    files.Add({{"result", "retried"}}).Increment(static_cast<double>(f->retried.load()));
  }

  if (const KafkaCounters* k = src.kafka) {
    auto counter = [&](const char* name, const char* help, const std::atomic<long>& v) {
      BuildCounter().Name(name).Help(help).Register(now).Add({}).Increment(
          static_cast<double>(v.load()));
    };
    counter("forewarden_kafka_messages_total", "Kafka messages consumed.", k->messages);
    counter("forewarden_kafka_rows_total", "Rows from Kafka applied (in committed batches).",
            k->rows);
    counter("forewarden_kafka_dead_letters_total",
            "Kafka messages refused (bad rows), sent to the dead-letter topic.", k->dead_letters);
    counter("forewarden_kafka_batches_total", "Engine batches of Kafka rows committed.",
            k->batches);
    counter("forewarden_kafka_errors_total", "Errors librdkafka reported (brokers, network).",
            k->errors);
    counter("forewarden_kafka_rebalances_total", "Partition assignments and revocations.",
            k->rebalances);
    BuildGauge()
        .Name("forewarden_kafka_lag_messages")
        .Help("Kafka messages on this instance's partitions not yet committed here.")
        .Register(now)
        .Add({})
        .Set(static_cast<double>(k->lag.load()));
    BuildGauge()
        .Name("forewarden_kafka_partitions")
        .Help("Kafka partitions assigned to this instance.")
        .Register(now)
        .Add({})
        .Set(static_cast<double>(k->partitions.load()));
    BuildGauge()
        .Name("forewarden_kafka_restoring_partitions")
        .Help("Partitions being restored from the changelog before this instance consumes them.")
        .Register(now)
        .Add({})
        .Set(static_cast<double>(k->restoring.load()));
  }
  if (const ChangelogCounters* c = src.changelog) {
    auto counter = [&](const char* name, const char* help, double v) {
      BuildCounter().Name(name).Help(help).Register(now).Add({}).Increment(v);
    };
    counter("forewarden_changelog_records_total",
            "Changelog records written (series changed and partition positions).",
            static_cast<double>(c->records.load()));
    counter("forewarden_changelog_bytes_total",
            "Bytes of changelog keys and values written, before compression.",
            static_cast<double>(c->bytes.load()));
    counter("forewarden_changelog_failures_total",
            "Changelog records the brokers refused for good (consumption stops).",
            static_cast<double>(c->failed.load()));
    counter("forewarden_changelog_restores_total", "Partitions restored from the changelog.",
            static_cast<double>(c->restores.load()));
    counter("forewarden_changelog_restored_series_total", "Series adopted from the changelog.",
            static_cast<double>(c->restored.load()));
    counter("forewarden_changelog_restore_bytes_total",
            "Changelog bytes read while restoring partitions.",
            static_cast<double>(c->restore_bytes.load()));
    counter("forewarden_changelog_restore_seconds_total",
            "Seconds spent reading and adopting changelog partitions.",
            static_cast<double>(c->restore_ms.load()) / 1000.0);
  }

  std::vector<prometheus::MetricFamily> families = now.Collect();
  for (auto& f : live_->Collect()) families.push_back(std::move(f));
  std::ostringstream out;
  prometheus::TextSerializer().Serialize(out, families);
  return out.str();
}

}  // namespace forewarden
