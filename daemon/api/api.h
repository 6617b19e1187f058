// The HTTP API of `forewarden serve` (shapes documented in the README, "HTTP API"):
//   POST /v1/actuals                      CSV or NDJSON batch, all or nothing
//   GET  /v1/series                       list: ?policy= &label=name:value &status= &sort= &limit=
//   &offset= GET  /v1/series/{key}                 next forecast, interval, statistics, signals,
//   alerts GET  /v1/series/{key}/history         ?from=&to= (ISO dates): what a chart needs POST
//   /v1/series/{key}/reset           {"to": "value"|"last"|"mean", "value", "k", "who", "note"} GET
//   /v1/policies                     with derived limits and expected false alerts GET  /v1/alerts
//   ?state= &policy= &rule= &severity= &series= &group= &limit= &before= GET  /v1/alerts/{id} with
//   its history and deliveries POST /v1/alerts/{id}/acknowledge      {"by", "note"} POST
//   /v1/alerts/{id}/snooze           {"until": period or ISO time, "by", "note"} POST
//   /v1/alerts/{id}/resolve          {"by", "note"} GET  /v1/deliveries
//   ?state=dead|pending|delivered &sink= POST /v1/deliveries/retry             ?sink=  dead
//   deliveries back to pending GET  /healthz, /readyz GET  /metrics Prometheus text exposition
//   (metrics.h)
//   GET  /v1/attention                    the planner's list (attention.h)
//   GET  /v1/access                       how the service is protected and who the token is
//   GET  /v1/forecasts                    every series' next H forecasts, streamed (export.h)
//   GET  /, /page/{file}                  the planner page (web/assets.h)
// Who may call what is the role the bearer token carries (access.h). Reads run as jobs on the
// engine thread; the lists' passes over every series run on the reader thread over a read view
// (engine/read_view.h) taken between batches, so they do not hold up ingest. Every route is one row
// of the table in api.cpp (method, pattern, the role it needs, handler); the route label of the
// request metrics is the pattern. Domain errors (common/status.h) become HTTP statuses in one
// function, HttpStatusOf, and nowhere else.
#pragma once

#include <functional>
#include <memory>
#include <mutex>
#include <string>
#include <vector>

#include "config/settings.h"
#include "daemon/api/access.h"
#include "daemon/api/export.h"
#include "daemon/api/read_worker.h"
#include "daemon/engine/engine.h"
#include "daemon/http/http_server.h"
#include "daemon/observe/metrics.h"

namespace forewarden {

class Api {
 public:
  Api(Engine& engine, std::shared_ptr<const config::Settings> settings, Access access,
      Metrics* metrics = nullptr);
  // Answers every request exactly once. No exception leaves it: a handler that throws (here or
  // in its engine job) is answered 500, logged with its request line and counted.
  void Handle(HttpRequest&& request, Respond respond);
  // Thread-safe: settings and tokens after a reload.
  void Update(std::shared_ptr<const config::Settings> settings, Access access);
  const ApiCounters& counters() const { return counters_; }

  // Instances sharing series through Kafka (daemon/feeds/changelog.h): a request for a series
  // or an alert of a partition another instance holds is redirected there (307, same path and
  // query); readiness reports restoring partitions; GET /v1/instances shows who holds what.
  // Set before the server starts.
  struct Sharing {
    std::function<std::string()> self;                                 // this instance's URL
    std::function<std::string()> not_ready;                            // "" when ready
    std::function<std::int32_t(const std::string& key)> partition_of;  // -1: not known yet
    std::function<std::vector<std::string>()> owners;                  // URL by partition
    std::function<std::vector<std::int32_t>()> held;                   // partitions held here
  };
  void Share(Sharing sharing) { sharing_ = std::make_unique<Sharing>(std::move(sharing)); }

  struct Call;  // one request on its way through a handler (api.cpp)
  struct Route;

 private:
  void Dispatch(const std::shared_ptr<Call>& call);
  // Runs `job` on the engine thread behind the same guard as Handle; busy when the queue is full.
  void OnEngine(const std::shared_ptr<Call>& call, std::function<void()> job);
  std::function<void()> Guarded(const std::shared_ptr<Call>& call, std::function<void()> job);
  // Runs `job` on the API's reader thread (filters and sorts over a read view), same guard.
  void OffEngine(const std::shared_ptr<Call>& call, std::function<void()> job);
  void Internal(Call& call, const char* what);
  // Whether the caller may use the route; answers 401 or 403 when not.
  bool Authorized(Call& call);
  // Who an action records: the token's person, else the body's field; empty when neither.
  static std::string Actor(const Call& call, const std::string& from_body);
  std::shared_ptr<const config::Settings> settings() const;
  std::shared_ptr<const Access> access() const;

  void Health(const std::shared_ptr<Call>& c);
  void Ready(const std::shared_ptr<Call>& c);
  void MetricsText(const std::shared_ptr<Call>& c);
  void Ingest(const std::shared_ptr<Call>& c);
  void Policies(const std::shared_ptr<Call>& c);
  static void AnswerPolicies(Call& call, const ReadView& view,
                             const std::vector<std::int64_t>& arrivals);
  void SeriesList(const std::shared_ptr<Call>& c);
  void SeriesDetailOf(const std::shared_ptr<Call>& c);
  void SeriesHistory(const std::shared_ptr<Call>& c);
  void SeriesForecast(const std::shared_ptr<Call>& c);
  void Forecasts(const std::shared_ptr<Call>& c);
  void SeriesReset(const std::shared_ptr<Call>& c);
  void AlertList(const std::shared_ptr<Call>& c);
  void AlertDetail(const std::shared_ptr<Call>& c);
  void AlertAct(const std::shared_ptr<Call>& c);
  void DeliveryList(const std::shared_ptr<Call>& c);
  void DeliveryRetry(const std::shared_ptr<Call>& c);
  void Attention(const std::shared_ptr<Call>& c);
  void AccessInfo(const std::shared_ptr<Call>& c);
  void Page(const std::shared_ptr<Call>& c);
  void Instances(const std::shared_ptr<Call>& c);
  // Sharing: answers a request for another instance's partition (true) or lets it through.
  bool Redirected(Call& call);

  static const std::vector<Route>& Routes();

  Engine& engine_;
  Metrics* metrics_;
  mutable std::mutex mu_;
  std::shared_ptr<const config::Settings> settings_;
  std::shared_ptr<const Access> access_;  // replaced whole on reload
  ApiCounters counters_;
  std::unique_ptr<Sharing> sharing_;
  ExportPool exports_;  // after what export jobs use: destroyed before it
  ReadWorker reader_;   // last: destroyed first, while what its jobs use still exists
};

// The longest horizon GET /v1/series/{key}/forecast serves.
inline constexpr std::int64_t kMaxHorizon = 104;

// Percent-decoding of a URL path or query component ('+' is a space in queries only).
std::string UrlDecode(std::string_view text, bool query);

}  // namespace forewarden
