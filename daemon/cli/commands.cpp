#include "daemon/cli/commands.h"

#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <iostream>
#include <map>
#include <sstream>

#include <unistd.h>

#include "config/load.h"
#include "daemon/api/export.h"
#include "daemon/cli/export.h"
#include "daemon/cli/push.h"
#include "daemon/cli/replay.h"
#include "daemon/cli/serve.h"
#include "daemon/cli/simulate.h"
#include "daemon/cli/tune.h"
#include "daemon/common/parse_number.h"
#include "daemon/common/text_out.h"
#include "daemon/store/backup.h"

namespace forewarden {
namespace {

constexpr const char* kUsage = R"(usage: forewarden COMMAND [OPTIONS]

commands:
  replay --config FILE --input FILE.csv [--output FILE.csv] [--alerts FILE.csv] [--horizon H]
        Run an actuals CSV (header series,period,value) through the monitoring engine and
        write one row per actual with forecast, error, signals, interval and alerts.
        "-" reads standard input / writes standard output (the default output).
        --alerts writes one row per alert episode: series, policy, rule, severity and the
        periods it opened, escalated and resolved (empty while still open).
  tune --config FILE --input FILE.csv [--truth FILE.csv] [--grid FILE.yaml]
       [--results FILE.csv] [--settings-out FILE.yaml] [--report FILE.html] [--threads N]
        Choose each policy's smoothing constants, adaptive alpha and alert budgets from
        history: every candidate of a grid (defaults per method, or --grid) run over the
        same history with the service's step and rules; prints a table, writes every
        candidate's figures, the recommended settings and an HTML report.
  serve --config FILE [--listen HOST:PORT] [--data DIR]
        Run the service: HTTP API (default 127.0.0.1:8700), durable store in the data
        folder, optional drop folder. SIGHUP reloads the settings; SIGTERM stops gracefully.
  push FILE --url URL [--batch N] [--token-file F] [--ca-file F]
        Send an actuals CSV to a running service in batches of N rows (default 5000).
  export --out FILE [--url URL] [--policy P] [--label NAME:VALUE] [--horizon H]
         [--format csv|ndjson] [--token-file F] [--ca-file F]
        Fetch every matching series' next H forecasts (default 13) with their intervals
        from a running service, all from one moment, into FILE (written as FILE.partial,
        renamed when complete).
  backup --data DIR --to FILE
        Copy the store of a service's data folder to FILE while the service runs (SQLite
        online backup, integrity-checked). Restore: stop the service, put FILE in place of
        DIR/forewarden.db (remove forewarden.db-wal and -shm), start it.
  check-config FILE
        Validate a settings file: print every problem, or a summary of the policies.
  simulate [--series N] [--periods T] [--seed S] [--period day|week|month]
           [--start DATE] [--intermittent-share X] [--seasonal-share X]
           [--change-share X] [--level-min U] [--level-max U] [--noise X]
           [--output FILE.csv] [--truth FILE.csv]
        Write an invented demand feed (garden and hardware stores) for demos and tests:
        levels log-uniform in [level-min, level-max] (default 5..400 units), noise s.d. up to
        noise x level (default 0.3), shares of slow movers (0.1), seasonal lines (0.2) and
        series with one injected change (0.3).
  version
        Print the version.
)";

// Parses "--name value" pairs after the command; flags in `known` only.
bool ParseFlags(const std::vector<std::string>& args, std::size_t from,
                const std::vector<std::string>& known, std::map<std::string, std::string>& flags,
                std::ostream& err) {
  for (std::size_t i = from; i < args.size(); ++i) {
    const std::string& a = args[i];
    bool found = false;
    for (const auto& k : known)
      if (a == "--" + k) found = true;
    if (!found) {
      err << "forewarden " << args[0] << ": unknown option '" << a << "'\n\n" << kUsage;
      return false;
    }
    if (i + 1 >= args.size()) {
      err << "forewarden " << args[0] << ": option '" << a << "' needs a value\n";
      return false;
    }
    flags[a.substr(2)] = args[++i];
  }
  return true;
}

// `text`, when given, receives the file's text.
bool LoadOrReport(const std::string& path, config::Settings& settings, std::ostream& err,
                  std::string* text = nullptr) {
  config::LoadResult loaded = config::LoadSettingsFile(path, text);
  if (!loaded.ok()) {
    for (const auto& p : loaded.problems) err << p.ToString() << '\n';
    err << loaded.problems.size() << (loaded.problems.size() == 1 ? " problem" : " problems")
        << " in " << path << '\n';
    return false;
  }
  settings = std::move(loaded.settings);
  return true;
}

// "limit by age (periods past the warm-up): 0-15 off, 16-31 0.9443, ..., 128+ 0.7564": bands
// with the same limit are merged; a Trigg's signal limit of 1 can never be passed ("off": no
// limit below 1 keeps the budget at that age).
std::string LimitsByAge(const monitors::RuleSpec& r, const config::RuleCalibration& c) {
  std::vector<std::pair<int, double>> bands;  // (from, limit)
  int from = 0;
  for (const monitors::AgeLimit& a : c.young) {
    if (bands.empty() || bands.back().second != a.limit) bands.emplace_back(from, a.limit);
    from = a.until;
  }
  if (bands.back().second != c.limit) bands.emplace_back(from, c.limit);
  std::string out = "limit by age (periods past the warm-up):";
  bool off = false;
  for (std::size_t i = 0; i < bands.size(); ++i) {
    char span[64];
    if (i + 1 < bands.size())
      std::snprintf(span, sizeof span, " %d-%d", bands[i].first, bands[i + 1].first - 1);
    else
      std::snprintf(span, sizeof span, " %d+", bands[i].first);
    out += span;
    if (r.signal == monitors::SignalKind::kTrigg && bands[i].second >= 1.0) {
      out += " off";
      off = true;
    } else {
      char v[32];
      std::snprintf(v, sizeof v, " %.4g", bands[i].second);
      out += v;
    }
    if (i + 1 < bands.size()) out += ',';
  }
  if (off) out += " (off: no limit of Trigg's signal below 1 keeps the budget at that age)";
  return out;
}

std::string DescribeStart(const monitors::PolicySpec& s) {
  if (monitors::IsIntermittent(s.method)) return "first demand";
  switch (s.start.kind) {
    case monitors::StartKind::kFirstActual:
      return "first-actual";
    case monitors::StartKind::kMeanOfFirst:
      return "mean of first " + std::to_string(s.start.count);
    case monitors::StartKind::kFitted:
      return "fitted on first " + std::to_string(s.start.count);
    case monitors::StartKind::kExplicit:
      return "explicit level " + FormatNumber(s.start.level);
  }
  return "?";
}

int CheckConfig(const std::vector<std::string>& args, std::ostream& out, std::ostream& err) {
  if (args.size() != 2) {
    err << "usage: forewarden check-config FILE\n";
    return 2;
  }
  config::Settings settings;
  if (!LoadOrReport(args[1], settings, err)) return 2;
  out << args[1] << ": " << settings.policies.size()
      << (settings.policies.size() == 1 ? " policy" : " policies") << ", first match wins\n";
  for (const config::Policy& p : settings.policies) {
    const monitors::PolicySpec& s = p.spec;
    out << "  " << p.name << ": match " << p.match.key;
    for (const auto& [k, v] : p.match.labels) out << " " << k << "=" << v;
    out << ", " << monitors::PeriodKindName(p.period) << ", " << monitors::MethodName(s.method)
        << " alpha " << FormatNumber(s.constants.alpha);
    if (monitors::HasTrend(s.method)) out << " trend_beta " << FormatNumber(s.constants.beta);
    if (s.constants.phi != 1.0) out << " damping " << FormatNumber(s.constants.phi);
    if (monitors::IsSeasonal(s.method))
      out << " season_gamma " << FormatNumber(s.constants.gamma) << " season_length "
          << s.constants.season_length;
    if (s.adaptive.enabled)
      out << ", adaptive " << (s.adaptive.lagged ? "lagged" : "immediate") << " ["
          << FormatNumber(s.adaptive.floor) << ", " << FormatNumber(s.adaptive.cap) << "]";
    out << ", start " << DescribeStart(s) << ", signal_beta " << FormatNumber(s.signal_beta)
        << ", warmup " << s.warmup << ", gaps "
        << (s.gaps == monitors::GapRule::kZero ? "zero" : "skip") << ", coverage "
        << FormatNumber(s.coverage) << '\n';
    if (monitors::IsIntermittent(s.method)) {
      char line[200];
      std::snprintf(line, sizeof line,
                    "    in-control demand (budgets are derived on it): in a period with "
                    "probability %.3g, of size max(1, %.4g + %.4g z), z standard normal\n",
                    s.in_control.probability, s.in_control.size_mean, s.in_control.size_sd);
      out << line;
    }
    for (const auto& r : s.rules) {
      out << "    rule " << r.name << ": " << monitors::SignalKindName(r.signal);
      if (r.signal == monitors::SignalKind::kStale) {
        out << " after " << std::lround(r.limit) << " periods past due";
      } else if (r.signal == monitors::SignalKind::kAlphaAtCap) {
        out << " for " << r.persistence << " periods";
      } else {
        if (r.periods > 0) out << " over " << r.periods << " periods";
        out << " beyond " << FormatNumber(r.limit) << " (" << monitors::DirectionName(r.direction)
            << ") for " << r.persistence << (r.persistence == 1 ? " period" : " periods")
            << ", clears within " << FormatNumber(r.clear);
        if (r.escalate_limit)
          out << ", " << monitors::SeverityName(r.escalate_severity) << " beyond "
              << FormatNumber(*r.escalate_limit);
      }
      out << ", " << monitors::SeverityName(r.severity) << ", resolves after " << r.resolve_after
          << (r.resolve_after == 1 ? " clear period" : " clear periods") << '\n';
      for (const auto& c : p.calibrations)
        if (c.rule == r.name) {
          char line[200];
          std::snprintf(line, sizeof line,
                        "      limit derived for one false alert per %g periods at every age: %.4g "
                        "from age %d; expected %.3g false alerts per week per 1,000 in-control "
                        "series\n",
                        c.every, c.limit, c.young.empty() ? 0 : c.young.back().until,
                        1000.0 * c.per_series_week);
          out << line;
          if (!c.young.empty()) out << "      " << LimitsByAge(r, c) << '\n';
        }
    }
  }
  const config::Alerts& a = settings.alerts;
  out << "  alerts: " << a.sinks.size() << (a.sinks.size() == 1 ? " sink" : " sinks");
  for (const auto& k : a.sinks)
    out << ", " << k.name << " ("
        << (k.kind == config::Sink::Kind::kWebhook        ? "webhook"
            : k.kind == config::Sink::Kind::kAlertmanager ? "alertmanager"
            : k.kind == config::Sink::Kind::kKafka        ? "kafka"
                                                          : "log")
        << (k.url.empty() ? "" : " " + k.url)
        << (k.topic.empty() ? "" : " topic " + k.topic + " on " + k.brokers)
        << (k.secret_file.empty() && k.secret_env.empty() ? "" : ", signed") << ")";
  out << "; storms of more than " << a.storm_threshold << " series grouped\n";
  return 0;
}

int Replay(const std::vector<std::string>& args, std::ostream& err) {
  std::map<std::string, std::string> flags;
  if (!ParseFlags(args, 1, {"config", "input", "output", "alerts", "horizon"}, flags, err))
    return 2;
  if (!flags.count("config") || !flags.count("input")) {
    err << "usage: forewarden replay --config FILE --input FILE.csv [--output FILE.csv] "
           "[--alerts FILE.csv] [--horizon H]\n";
    return 2;
  }
  int horizon = 0;
  if (flags.count("horizon")) {
    Result<std::int64_t> h = ParseWholeNumber(flags["horizon"], 1, kMaxExportHorizon);
    if (!h) {
      err << "forewarden replay: --horizon: " << h.status().message() << '\n';
      return 2;
    }
    horizon = static_cast<int>(*h);
  }
  config::Settings settings;
  if (!LoadOrReport(flags["config"], settings, err)) return 2;
  ReplayOptions options;
  options.input = flags["input"];
  options.output = flags.count("output") ? flags["output"] : "-";
  if (flags.count("alerts")) options.alerts = flags["alerts"];
  options.horizon = horizon;
  const Result<ReplaySummary> summary = RunReplay(settings, options);
  if (!summary) {
    err << "forewarden replay: " << (options.input == "-" ? "<stdin>" : options.input) << ": "
        << summary.status().message() << '\n';
    // bad input exits 2 (nothing was written), a file that cannot be read or written 1
    if (summary.status().kind() != ErrorKind::kInvalid) return 1;
    err << "nothing was written: fix the input and run the replay again\n";
    return 2;
  }
  err << FormatReplaySummary(*summary);
  return 0;
}

int Tune(const std::vector<std::string>& args, std::ostream& out, std::ostream& err) {
  std::map<std::string, std::string> flags;
  if (!ParseFlags(
          args, 1,
          {"config", "input", "truth", "grid", "results", "settings-out", "report", "threads"},
          flags, err))
    return 2;
  if (!flags.count("config") || !flags.count("input")) {
    err << "usage: forewarden tune --config FILE --input FILE.csv [--truth FILE.csv] "
           "[--grid FILE.yaml] [--results FILE.csv] [--settings-out FILE.yaml] "
           "[--report FILE.html] [--threads N]\n";
    return 2;
  }
  TuneOptions o;
  if (flags.count("threads")) {
    Result<std::int64_t> t = ParseWholeNumber(flags["threads"], 1, 1024);
    if (!t) {
      err << "forewarden tune: --threads: " << t.status().message() << '\n';
      return 2;
    }
    o.threads = static_cast<int>(*t);
  }
  o.config = flags["config"];
  o.input = flags["input"];
  o.truth = flags.count("truth") ? flags["truth"] : "";
  o.grid = flags.count("grid") ? flags["grid"] : "";
  o.results = flags.count("results") ? flags["results"] : "";
  o.settings_out = flags.count("settings-out") ? flags["settings-out"] : "";
  o.report = flags.count("report") ? flags["report"] : "";
  for (const std::string* path : {&o.results, &o.settings_out, &o.report})
    if (*path == "-") {
      err << "forewarden tune: the outputs are files; '-' is not one (the table goes to standard "
             "output)\n";
      return 2;
    } else if (!path->empty() && (*path == o.config || *path == o.input)) {
      err << "forewarden tune: " << *path << " is an input; write the outputs elsewhere\n";
      return 2;
    }
  o.progress = isatty(2) != 0;
  config::Settings settings;
  std::string text;
  if (!LoadOrReport(o.config, settings, err, &text)) return 2;
  const Result<TuneSummary> summary = RunTune(settings, text, o, out, err);
  if (!summary) {
    err << "forewarden tune: " << summary.status().message() << '\n';
    if (summary.status().kind() == ErrorKind::kInvalid) {
      err << "nothing was written: fix the input and run tune again\n";
      return 2;
    }
    return 1;
  }
  err << FormatTuneSummary(*summary);
  return 0;
}

bool ToNumber(const std::string& text, double& out) {
  char* end = nullptr;
  out = std::strtod(text.c_str(), &end);
  return !text.empty() && end && *end == '\0';
}

int Simulate(const std::vector<std::string>& args, std::ostream& err) {
  std::map<std::string, std::string> flags;
  if (!ParseFlags(
          args, 1,
          {"series", "periods", "seed", "period", "start", "intermittent-share", "seasonal-share",
           "change-share", "level-min", "level-max", "noise", "output", "truth"},
          flags, err))
    return 2;
  SimulateOptions o;
  for (const auto& [name, value] : flags) {
    double v = 0;
    const bool numeric = ToNumber(value, v);
    if (name == "output") {
      o.output = value;
    } else if (name == "truth") {
      o.truth = value;
    } else if (name == "start") {
      o.start = value;
    } else if (name == "period") {
      auto k = monitors::ParsePeriodKind(value);
      if (!k) {
        err << "forewarden simulate: --period must be day, week or month\n";
        return 2;
      }
      o.period = *k;
    } else if (!numeric) {
      err << "forewarden simulate: --" << name << " needs a number, got '" << value << "'\n";
      return 2;
    } else if (name == "series") {
      o.series = static_cast<long>(v);
    } else if (name == "periods") {
      o.periods = static_cast<long>(v);
    } else if (name == "seed") {
      o.seed = static_cast<std::uint64_t>(v);
    } else if (name == "intermittent-share") {
      o.intermittent_share = v;
    } else if (name == "seasonal-share") {
      o.seasonal_share = v;
    } else if (name == "change-share") {
      o.change_share = v;
    } else if (name == "level-min") {
      o.level_min = v;
    } else if (name == "level-max") {
      o.level_max = v;
    } else if (name == "noise") {
      o.noise = v;
    }
  }
  std::string error;
  const int rc = RunSimulate(o, error);
  if (rc != 0) err << "forewarden simulate: " << error << '\n';
  return rc;
}

}  // namespace

int RunCommand(const std::vector<std::string>& args, std::ostream& out, std::ostream& err) {
  if (args.empty() || args[0] == "help" || args[0] == "--help" || args[0] == "-h") {
    (args.empty() ? err : out) << kUsage;
    return args.empty() ? 2 : 0;
  }
  const std::string& cmd = args[0];
  if (cmd == "replay") return Replay(args, err);
  if (cmd == "tune") return Tune(args, out, err);
  if (cmd == "check-config") return CheckConfig(args, out, err);
  if (cmd == "backup") {
    std::map<std::string, std::string> flags;
    if (!ParseFlags(args, 1, {"data", "to"}, flags, err)) return 2;
    if (!flags.count("data") || !flags.count("to")) {
      err << "usage: forewarden backup --data DIR --to FILE\n";
      return 2;
    }
    const Result<BackupCopy> r = BackupStore(flags["data"], flags["to"]);
    if (!r) {
      err << "forewarden backup: " << r.status().message() << '\n';
      return 1;
    }
    out << "forewarden backup: " << r->pages << " pages, " << r->bytes << " bytes to "
        << flags["to"] << " (integrity ok)\n";
    return 0;
  }
  if (cmd == "serve") {
    std::map<std::string, std::string> flags;
    if (!ParseFlags(args, 1, {"config", "listen", "data"}, flags, err)) return 2;
    if (!flags.count("config")) {
      err << "usage: forewarden serve --config FILE [--listen HOST:PORT] [--data DIR]\n";
      return 2;
    }
    return RunServe({flags["config"], flags["listen"], flags["data"]}, out, err);
  }
  if (cmd == "simulate") return Simulate(args, err);
  if (cmd == "push") {
    if (args.size() < 2 || args[1].rfind("--", 0) == 0) {
      err << "usage: forewarden push FILE --url URL [--batch N] [--token-file F] [--ca-file F]\n";
      return 2;
    }
    std::map<std::string, std::string> flags;
    if (!ParseFlags(args, 2, {"url", "batch", "token-file", "ca-file"}, flags, err)) return 2;
    PushOptions o;
    o.file = args[1];
    o.url = flags.count("url") ? flags["url"] : "http://127.0.0.1:8700";
    o.token_file = flags["token-file"];
    o.ca_file = flags["ca-file"];
    if (flags.count("batch")) {
      Result<std::int64_t> v = ParseWholeNumber(flags["batch"], 1, 10000000);
      if (!v) {
        err << "forewarden push: --batch: " << v.status().message() << '\n';
        return 2;
      }
      o.batch = static_cast<long>(*v);
    }
    return RunPush(o, out, err);
  }
  if (cmd == "export") {
    std::map<std::string, std::string> flags;
    if (!ParseFlags(args, 1,
                    {"url", "out", "policy", "label", "horizon", "format", "token-file", "ca-file"},
                    flags, err))
      return 2;
    if (!flags.count("out")) {
      err << "usage: forewarden export --out FILE [--url URL] [--policy P] [--label NAME:VALUE] "
             "[--horizon H] [--format csv|ndjson] [--token-file F] [--ca-file F]\n";
      return 2;
    }
    ExportOptions o;
    o.out = flags["out"];
    o.url = flags.count("url") ? flags["url"] : "http://127.0.0.1:8700";
    o.policy = flags["policy"];
    o.label = flags["label"];
    o.token_file = flags["token-file"];
    o.ca_file = flags["ca-file"];
    if (flags.count("format")) o.format = flags["format"];
    if (o.format != "csv" && o.format != "ndjson") {
      err << "forewarden export: --format: must be csv or ndjson\n";
      return 2;
    }
    if (flags.count("horizon")) {
      Result<std::int64_t> v = ParseWholeNumber(flags["horizon"], 1, kMaxExportHorizon);
      if (!v) {
        err << "forewarden export: --horizon: " << v.status().message() << '\n';
        return 2;
      }
      o.horizon = static_cast<int>(*v);
    }
    return RunExport(o, out, err);
  }
  if (cmd == "version" || cmd == "--version") {
    out << "forewarden " << FOREWARDEN_VERSION << '\n';
    return 0;
  }
  err << "forewarden: unknown command '" << cmd << "'\n\n" << kUsage;
  return 2;
}

}  // namespace forewarden
