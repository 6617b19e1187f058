#include "daemon/cli/serve.h"

#include <sys/stat.h>
#include <atomic>
#include <chrono>

#include <condition_variable>
#include <csignal>
#include <cstdlib>
#include <ctime>
#include <fstream>
#include <iostream>
#include <mutex>
#include <sstream>
#include <thread>

#include "config/load.h"
#include "daemon/api/api.h"
#include "daemon/common/log.h"
#include "daemon/common/secret_text.h"
#include "daemon/engine/engine.h"
#include "daemon/feeds/drop_folder.h"
#include "daemon/feeds/kafka_source.h"
#include "daemon/http/http_server.h"
#include "daemon/notify/delivery.h"
#include "daemon/observe/metrics.h"
#include "daemon/observe/systemd_notify.h"
#include "daemon/store/alert_reads.h"

namespace forewarden {

bool SplitListen(const std::string& listen, std::string& host, std::uint16_t& port) {
  const std::size_t colon = listen.rfind(':');
  if (colon == std::string::npos || colon + 1 >= listen.size()) return false;
  host = listen.substr(0, colon);
  if (host.size() >= 2 && host.front() == '[' && host.back() == ']')
    host = host.substr(1, host.size() - 2);
  if (host.empty()) return false;
  const std::string digits = listen.substr(colon + 1);
  if (digits.find_first_not_of("0123456789") != std::string::npos || digits.size() > 5)
    return false;
  const long p = std::stol(digits);
  if (p > 65535) return false;
  port = static_cast<std::uint16_t>(p);
  return true;
}

bool IsLoopback(const std::string& host) {
  return host == "localhost" || host == "::1" || host.rfind("127.", 0) == 0;
}

namespace {

void Log(std::ostream& err, const std::string& line, const char* level = "info") {
  WriteLog(err, LogLine(level, line));
}

bool LoadSettings(const ServeOptions& o, std::shared_ptr<const config::Settings>& out,
                  std::string& error) {
  config::LoadResult r = config::LoadSettingsFile(o.config);
  if (!r.ok()) {
    std::ostringstream msg;
    for (const auto& p : r.problems) msg << p.ToString() << "\n";
    msg << r.problems.size() << (r.problems.size() == 1 ? " problem" : " problems") << " in "
        << o.config;
    error = msg.str();
    return false;
  }
  if (!o.listen.empty()) r.settings.server.listen = o.listen;
  if (!o.data.empty()) r.settings.server.data = o.data;
  out = std::make_shared<const config::Settings>(std::move(r.settings));
  return true;
}

}  // namespace

int RunServe(const ServeOptions& o, std::ostream& out, std::ostream& err) {
  std::shared_ptr<const config::Settings> settings;
  std::string error;
  if (!LoadSettings(o, settings, error)) {
    err << error << '\n';
    return 2;
  }
  const config::Server& srv = settings->server;
  std::string host;
  std::uint16_t port = 0;
  if (!SplitListen(srv.listen, host, port)) {
    err << "forewarden serve: listen address '" << srv.listen << "' is not HOST:PORT\n";
    return 2;
  }
  Result<Access> access = Access::Load(srv);
  if (!access) {
    err << "forewarden serve: " << access.status().message() << '\n';
    return 2;
  }
  if (!IsLoopback(host) && access->open()) {
    err << "forewarden serve: refusing to listen on " << host
        << " without a bearer token: set server.token_file, server.token_env or "
           "server.people_file, or listen on 127.0.0.1\n";
    return 2;
  }
  // A token that crosses a network in clear text is as good as published.
  if (!IsLoopback(host) && srv.tls_cert_file.empty() && !srv.tls_terminated_by_proxy) {
    err << "forewarden serve: refusing to listen on " << host
        << " without TLS: set server.tls_cert_file and server.tls_key_file, or "
           "server.tls_terminated_by_proxy: true when a proxy in front terminates TLS\n";
    return 2;
  }

  const auto wall_clock = [] {
    return std::chrono::duration_cast<std::chrono::milliseconds>(
               std::chrono::system_clock::now().time_since_epoch())
        .count();
  };
  Engine engine(settings, wall_clock);
  Delivery delivery(settings, wall_clock);
  Metrics metrics;
  engine.OnOutbox([&delivery] { delivery.Notify(); });
  engine.OnCommit([&metrics](double seconds) { metrics.ObserveCommit(seconds); });
  // Settings that cannot work exit 2, failures of the machine or the store exit 1.
  auto exit_code = [](const Status& s) { return s.kind() == ErrorKind::kInvalid ? 2 : 1; };
  const IngestLimits limits{srv.max_rows_per_batch, static_cast<std::size_t>(srv.max_key_bytes),
                            static_cast<std::size_t>(srv.max_labels),
                            static_cast<std::size_t>(srv.max_label_bytes)};
  std::unique_ptr<KafkaSource> kafka;
  if (!settings->kafka.brokers.empty()) {
    kafka = std::make_unique<KafkaSource>(
        engine, settings->kafka, limits,
        [&err](const std::string& line, const char* level) { Log(err, line, level); });
    // Sharing series: the changelog exists before the engine's first commit can publish.
    if (!settings->kafka.changelog_topic.empty())
      if (Status shared = kafka->Share(PublicUrl(*settings)); !shared) {
        err << "forewarden serve: " << shared.message() << '\n';
        return exit_code(shared);
      }
  }
  if (Status started = engine.Start(); !started) {
    err << "forewarden serve: " << started.message() << '\n';
    return exit_code(started);
  }
  // Undelivered events from before a stop or a crash go out first.
  if (Status started = delivery.Start(); !started) {
    err << "forewarden serve: " << started.message() << '\n';
    engine.Stop();
    return exit_code(started);
  }
  Api api(engine, settings, std::move(*access), &metrics);
  if (kafka && !settings->kafka.changelog_topic.empty()) {
    KafkaSource* source = kafka.get();
    api.Share(Api::Sharing{
        [source] { return source->Owner(); }, [source] { return source->NotReady(); },
        [source](const std::string& key) { return source->PartitionOf(key); },
        [source] { return source->Owners(); }, [source] { return source->Assigned(); }});
  }
  HttpOptions http;
  http.host = host;
  http.port = port;
  http.max_body_bytes = static_cast<std::size_t>(srv.max_body_bytes);
  http.max_connections = static_cast<std::size_t>(srv.max_connections);
  http.header_timeout = std::chrono::seconds(srv.header_timeout_seconds);
  http.idle_timeout = std::chrono::seconds(srv.idle_timeout_seconds);
  HttpServer server(http, [&api](HttpRequest&& r, Respond respond) {
    api.Handle(std::move(r), std::move(respond));
  });
  Status listening =
      srv.tls_cert_file.empty() ? Status::Ok() : server.UseTls(srv.tls_cert_file, srv.tls_key_file);
  if (listening) listening = server.Start();
  if (!listening) {
    err << "forewarden serve: " << listening.message() << '\n';
    engine.Stop();
    delivery.Stop();
    return exit_code(listening);
  }
  std::unique_ptr<DropFolder> folder;
  if (!srv.folder.empty()) {
    folder = std::make_unique<DropFolder>(
        engine, srv.folder,
        IngestLimits{srv.max_rows_per_batch, static_cast<std::size_t>(srv.max_key_bytes),
                     static_cast<std::size_t>(srv.max_labels),
                     static_cast<std::size_t>(srv.max_label_bytes)},
        std::chrono::milliseconds(srv.folder_poll_ms),
        [&err](const std::string& line) { Log(err, line); });
    if (Status started = folder->Start(); !started) {
      err << "forewarden serve: " << started.message() << '\n';
      server.Shutdown(std::chrono::seconds(0));
      server.Run();
      engine.Stop();
      delivery.Stop();
      return 1;
    }
  }
  if (kafka) {
    // Other instances reach this one at alerts.public_url, else at the port bound just now.
    if (settings->alerts.public_url.empty())
      kafka->SetOwner(std::string(srv.tls_cert_file.empty() ? "http://" : "https://") +
                      (host.find(':') != std::string::npos ? "[" + host + "]" : host) + ":" +
                      std::to_string(server.port()));
    if (Status started = kafka->Start(); !started) {
      err << "forewarden serve: " << started.message() << '\n';
      kafka.reset();
      if (folder) folder->Stop();
      server.Shutdown(std::chrono::seconds(0));
      server.Run();
      engine.Stop();
      delivery.Stop();
      return exit_code(started);
    }
  }
  std::atomic<long> reloads_ok{0}, reloads_failed{0};  // server and engine threads count them
  metrics.SetSources(MetricSources{&engine, &server.counters(), &api.counters(),
                                   folder ? &folder->counters() : nullptr, &delivery, &reloads_ok,
                                   &reloads_failed, kafka ? &kafka->counters() : nullptr,
                                   kafka ? kafka->changelog_counters() : nullptr});
  bool stopping = false;
  const std::chrono::seconds grace(srv.shutdown_grace_seconds);
  server.OnSignals([&](int signo) {
    if (signo == SIGHUP) {
      std::shared_ptr<const config::Settings> next;
      std::string why;
      if (!LoadSettings(o, next, why)) {
        ++reloads_failed;
        Log(err, "reload refused, the settings in force stay:\n" + why, "warn");
        return;
      }
      Result<Access> next_access = Access::Load(next->server);
      if (!next_access) {
        ++reloads_failed;
        Log(err, "reload refused, the settings in force stay: " + next_access.status().message(),
            "warn");
        return;
      }
      // Series keep their policy by name; a policy holding series must stay with the same
      // period, method and season length. Checked on the engine thread, then swapped there.
      const bool queued = engine.Post([&, next, next_access = std::move(*next_access)] {
        std::string problem;
        engine.ForEachSeries([&](const SeriesView& v) {
          if (!problem.empty()) return;
          const config::Policy* np = nullptr;
          for (const auto& p : next->policies)
            if (p.name == v.policy) np = &p;
          if (!np)
            problem = "policy '" + std::string(v.policy) + "' holds series (e.g. '" +
                      std::string(v.key) + "') but is gone";
          else if (np->period != v.spec->period || np->spec.method != v.spec->spec.method ||
                   np->spec.constants.season_length != v.spec->spec.constants.season_length)
            problem = "policy '" + std::string(v.policy) +
                      "' changed its period, method or season length; "
                      "that needs a new policy name";
        });
        if (!problem.empty()) {
          ++reloads_failed;
          Log(err, "reload refused, the settings in force stay: " + problem, "warn");
          return;
        }
        // The listener keeps its TLS mode (a change needs a restart); certificate and key are
        // read again, so a renewed certificate serves from the next connection on. Checked
        // first: a refusal leaves every part with the settings in force.
        if (next->server.tls_cert_file.empty() != settings->server.tls_cert_file.empty()) {
          ++reloads_failed;
          Log(err,
              "reload refused, the settings in force stay: turning TLS on or off needs a restart",
              "warn");
          return;
        }
        // The Kafka consumer keeps its settings until a restart (its group and offsets).
        const config::Kafka &was = settings->kafka, &now = next->kafka;
        if (was.brokers != now.brokers || was.topics != now.topics || was.group != now.group ||
            was.format != now.format || was.dead_letter_topic != now.dead_letter_topic ||
            was.batch_rows != now.batch_rows || was.batch_ms != now.batch_ms ||
            was.properties != now.properties)
          Log(err, "kafka settings changed: they apply at the next restart", "warn");
        const bool tls = !next->server.tls_cert_file.empty();
        if (Status checked =
                tls ? server.CheckTls(next->server.tls_cert_file, next->server.tls_key_file)
                    : Status::Ok();
            !checked) {
          ++reloads_failed;
          Log(err, "reload refused, the settings in force stay: " + checked.message(), "warn");
          return;
        }
        if (Status updated = delivery.Update(next); !updated) {
          ++reloads_failed;
          Log(err, "reload refused, the settings in force stay: " + updated.message(), "warn");
          return;
        }
        // Checked above; only files replaced in the meantime could fail here, and then the
        // certificate in force stays.
        if (tls) {
          if (Status used = server.UseTls(next->server.tls_cert_file, next->server.tls_key_file);
              !used)
            Log(err, "certificate not renewed, the one in force stays: " + used.message(), "warn");
        }
        engine.Reload(next);
        api.Update(next, next_access);
        ++reloads_ok;
        NotifyServiceManager("READY=1\nSTATUS=serving " + std::to_string(next->policies.size()) +
                             " policies");
        Log(err,
            "reloaded " + o.config + " (" + std::to_string(next->policies.size()) + " policies)");
      });
      if (!queued) {
        ++reloads_failed;
        Log(err, "reload refused: the engine queue is full", "warn");
      }
      return;
    }
    if (stopping) {
      Log(err, "second signal: exiting at once", "warn");
      std::_Exit(1);
    }
    stopping = true;
    NotifyServiceManager("STOPPING=1");
    Log(err, "stopping: no new connections, finishing requests in flight (grace " +
                 std::to_string(grace.count()) + " s)");
    server.Shutdown(grace);
  });
  out << "forewarden: listening on "
      << (host.find(':') != std::string::npos ? "[" + host + "]" : host) << ":" << server.port()
      << std::endl;
  if (engine.recovered_series())
    Log(err, "recovered " + std::to_string(engine.recovered_series()) +
                 " series by replaying actuals committed after their last saved state");
  Log(err, "serving " + std::to_string(settings->policies.size()) + " policies from " + o.config +
               ", data in " + srv.data);
  for (const std::string& file : {srv.token_file, srv.people_file}) {
    struct stat st {};
    if (!file.empty() && stat(file.c_str(), &st) == 0 && (st.st_mode & (S_IROTH | S_IWOTH)))
      Log(err,
          "the token file " + file +
              " is readable or writable by other users; chmod o-rw it (tokens are never logged)",
          "warn");
  }
  NotifyServiceManager("READY=1\nSTATUS=serving " + std::to_string(settings->policies.size()) +
                       " policies");
  // Watchdog: the ping goes through the engine's queue, so a stuck engine stops the pings and
  // the service manager restarts the service.
  std::mutex watchdog_mu;
  std::condition_variable watchdog_wake;
  bool watchdog_stop = false;
  std::thread watchdog;
  if (const auto interval = WatchdogInterval(); interval.count() > 0) {
    watchdog = std::thread([&, interval] {
      std::unique_lock lock(watchdog_mu);
      while (!watchdog_wake.wait_for(lock, interval / 2, [&] { return watchdog_stop; }))
        engine.Post([] { NotifyServiceManager("WATCHDOG=1"); });
    });
  }
  server.Run();
  {
    std::lock_guard lock(watchdog_mu);
    watchdog_stop = true;
  }
  watchdog_wake.notify_all();
  if (watchdog.joinable()) watchdog.join();
  if (kafka) kafka->Stop();  // applies what it gathered while the engine still runs
  if (folder) folder->Stop();
  engine.Stop();
  delivery.Stop();
  Log(err, "stopped");
  return 0;
}

}  // namespace forewarden
