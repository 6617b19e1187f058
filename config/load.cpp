#include "config/load.h"

#include "config/yaml_reader.h"
#include "monitors/calibrate.h"

#include <yaml-cpp/yaml.h>

#include <cmath>
#include <fstream>
#include <set>
#include <sstream>

namespace config {

std::string Problem::ToString() const {
  std::ostringstream out;
  out << file;
  if (line > 0) out << ':' << line << ':' << column;
  out << ": ";
  if (!path.empty()) out << path << ": ";
  out << message;
  return out.str();
}

namespace {

using monitors::Method;
using Reader = YamlReader;

// The keys each map of the settings file takes (also the README's settings reference, which a
// test compares with these).
const std::set<std::string> kTopKeys = {"policies", "server", "fallback_policy", "alerts", "kafka"};
const std::set<std::string> kKafkaKeys = {
    "brokers",           "topics",     "group",           "format",     "batch_rows", "batch_ms",
    "dead_letter_topic", "properties", "changelog_topic", "partitioner"};
// librdkafka properties forewarden sets itself: the consumed offsets live in the store.
const std::set<std::string> kKafkaOwnProperties = {"bootstrap.servers",  "group.id",
                                                   "enable.auto.commit", "enable.auto.offset.store",
                                                   "auto.offset.reset",  "enable.partition.eof",
                                                   "rebalance_cb",       "offset_commit_cb"};
const std::set<std::string> kServerKeys = {"listen",
                                           "data",
                                           "token_file",
                                           "token_env",
                                           "synchronous",
                                           "max_body_bytes",
                                           "max_rows_per_batch",
                                           "max_connections",
                                           "header_timeout_seconds",
                                           "idle_timeout_seconds",
                                           "queue_depth",
                                           "shutdown_grace_seconds",
                                           "folder",
                                           "folder_poll_ms",
                                           "max_database_bytes",
                                           "cache_bytes",
                                           "state_flush_seconds",
                                           "state_flush_series",
                                           "max_key_bytes",
                                           "max_labels",
                                           "max_label_bytes",
                                           "max_series",
                                           "tls_cert_file",
                                           "tls_key_file",
                                           "tls_terminated_by_proxy",
                                           "people_file",
                                           "read_queue_depth",
                                           "max_exports",
                                           "token_for_reads"};
const std::set<std::string> kPolicyKeys = {"name",
                                           "match",
                                           "in_control",
                                           "period",
                                           "method",
                                           "alpha",
                                           "adaptive",
                                           "trend_beta",
                                           "damping",
                                           "season_gamma",
                                           "season_length",
                                           "start",
                                           "signal_beta",
                                           "warmup",
                                           "gaps",
                                           "coverage",
                                           "initial_mad",
                                           "max_gap",
                                           "rules",
                                           "history",
                                           "stale_after",
                                           "export_top_series",
                                           "negative_actuals"};
// croston and sba: the in-control demand budgets are calibrated on (monitors/calibrate.h)
const std::set<std::string> kInControlKeys = {"demand_probability", "size_mean", "size_sd"};
const std::set<std::string> kMatchKeys = {"key", "labels"};
const std::set<std::string> kAdaptiveKeys = {"floor", "cap", "lag"};
const std::set<std::string> kStartKeys = {"mean_of_first", "fitted", "level", "trend", "season"};
const std::set<std::string> kExplicitStartKeys = {"level", "trend", "season"};
const std::set<std::string> kRuleKeys = {
    "name",         "signal",         "limit",          "false_alert_every",
    "clear",        "clear_fraction", "persistence",    "direction",
    "severity",     "periods",        "escalate_limit", "escalate_severity",
    "resolve_after"};
const std::set<std::string> kAlertsKeys = {
    "storm_threshold",     "sinks", "max_attempts",   "initial_backoff_seconds",
    "max_backoff_seconds", "batch", "resend_seconds", "public_url",
    "check_seconds"};
const std::set<std::string> kSinkKeys = {"name",
                                         "topic",
                                         "brokers",
                                         "ca_file",
                                         "type",
                                         "url",
                                         "secret_file",
                                         "secret_env",
                                         "timeout_seconds",
                                         "key_id",
                                         "previous_secret_file",
                                         "previous_key_id"};

void ReadMatch(Reader& r, const YAML::Node& n, const std::string& path, Match& m) {
  if (n.IsScalar()) {
    m.key = n.Scalar();
  } else if (n.IsMap()) {
    r.CheckKeys(n, path, kMatchKeys);
    if (n["key"].IsDefined()) r.String(n["key"], path + ".key", m.key);
    const YAML::Node labels = n["labels"];
    if (labels.IsDefined()) {
      if (!labels.IsMap()) {
        r.Add(labels, path + ".labels", "must be a map of label name to value");
      } else {
        for (auto it = labels.begin(); it != labels.end(); ++it) {
          std::string value;
          if (r.String(it->second, path + ".labels." + it->first.Scalar(), value))
            m.labels.emplace_back(it->first.Scalar(), value);
        }
      }
    }
  } else {
    r.Add(n, path, "must be a key glob such as \"north/*\" or {key: ..., labels: {...}}");
    return;
  }
  if (m.key.empty()) r.Add(n, path, "the key glob is empty");
}

void ReadStart(Reader& r, const YAML::Node& n, const std::string& path,
               monitors::StartSpec& start) {
  using monitors::StartKind;
  if (n.IsScalar()) {
    if (n.Scalar() == "first-actual") {
      start.kind = StartKind::kFirstActual;
      start.count = 1;
    } else {
      r.Add(n, path,
            "must be first-actual, {mean_of_first: k}, {level: .., trend: .., season: [..]} or "
            "{fitted: n}, got '" +
                n.Scalar() + "'");
    }
    return;
  }
  if (!n.IsMap()) {
    r.Add(n, path, "must be first-actual or a map");
    return;
  }
  if (n["mean_of_first"].IsDefined() || n["fitted"].IsDefined()) {
    const bool fitted = n["fitted"].IsDefined();
    const std::string key = fitted ? "fitted" : "mean_of_first";
    r.CheckKeys(n, path, {key});
    start.kind = fitted ? StartKind::kFitted : StartKind::kMeanOfFirst;
    long k = -1;
    r.Int(n, key, path, k, 1, 100000);
    if (k > 0) start.count = static_cast<int>(k);
    return;
  }
  r.CheckKeys(n, path, kExplicitStartKeys);
  start.kind = StartKind::kExplicit;
  if (!n["level"].IsDefined()) {
    r.Add(n, path, "an explicit start needs 'level'");
  } else {
    r.Double(n["level"], path + ".level", start.level);
  }
  if (n["trend"].IsDefined()) r.Double(n["trend"], path + ".trend", start.trend);
  const YAML::Node season = n["season"];
  if (season.IsDefined()) {
    if (!season.IsSequence()) {
      r.Add(season, path + ".season", "must be a list of numbers");
    } else {
      for (std::size_t i = 0; i < season.size(); ++i) {
        double v = 0;
        if (r.Double(season[i], path + ".season[" + std::to_string(i) + "]", v))
          start.season.push_back(v);
      }
    }
  }
}

// Rule keys; the calibrated limit (false_alert_every) is derived later, in ReadPolicy, when
// the policy's method and constants are known. `every` and `clear_fraction` return the budget.
void ReadRule(Reader& r, const YAML::Node& n, const std::string& path, monitors::RuleSpec& rule,
              double& every, double& clear_fraction, bool& ok) {
  using monitors::SignalKind;
  ok = false;
  every = 0.0;
  clear_fraction = 1.0;
  if (!n.IsMap()) {
    r.Add(n, path, "a rule must be a map with name, signal and limit");
    return;
  }
  const std::size_t before = r.problems().size();
  r.CheckKeys(n, path, kRuleKeys);
  if (!n["name"].IsDefined())
    r.Add(n, path, "a rule needs a 'name'");
  else
    r.String(n["name"], path + ".name", rule.name);
  static const char* kSignals = "trigg, cusum, error, bias, accuracy, alpha_at_cap or stale";
  std::string text;
  if (!n["signal"].IsDefined()) {
    r.Add(n, path, std::string("a rule needs a 'signal' (") + kSignals + ")");
    return;
  } else if (r.String(n["signal"], path + ".signal", text)) {
    auto s = monitors::ParseSignalKind(text);
    if (!s) {
      r.Add(n["signal"], path + ".signal",
            std::string("must be ") + kSignals + ", got '" + text + "'");
      return;
    }
    rule.signal = *s;
  }
  const SignalKind sig = rule.signal;
  const bool windowed = sig == SignalKind::kBias || sig == SignalKind::kAccuracy ||
                        sig == SignalKind::kAlphaAtCap || sig == SignalKind::kStale;
  long periods = 0;
  if (windowed) {
    if (!n["periods"].IsDefined())
      r.Add(n, path,
            std::string("a ") + text + " rule needs 'periods' (" +
                (sig == SignalKind::kStale        ? "periods past due"
                 : sig == SignalKind::kAlphaAtCap ? "periods at the cap"
                                                  : "periods averaged") +
                ")");
    r.Int(n, "periods", path, periods, 1, 1000);
  } else if (sig == SignalKind::kCusum) {
    r.Int(n, "periods", path, periods, 1, 1000);  // optional: a windowed cumulative signal
  } else if (n["periods"].IsDefined()) {
    r.Add(n["periods"], path + ".periods",
          "only bias, accuracy, cusum, alpha_at_cap and stale rules take 'periods'");
  }
  const bool takes_limit = sig != SignalKind::kAlphaAtCap && sig != SignalKind::kStale;
  const bool calibrated = n["false_alert_every"].IsDefined();
  if (!takes_limit) {
    for (const char* key :
         {"limit", "false_alert_every", "clear", "clear_fraction", "escalate_limit"})
      if (n[key].IsDefined())
        r.Add(n[key], Reader::Join(path, key),
              std::string("a ") + text + " rule takes 'periods', not '" + key + "'");
  } else if (calibrated) {
    if (n["limit"].IsDefined())
      r.Add(n["limit"], path + ".limit", "give either 'limit' or 'false_alert_every', not both");
    if (n["clear"].IsDefined())
      r.Add(n["clear"], path + ".clear",
            "with 'false_alert_every' the clear level is 'clear_fraction' of the derived limit");
    r.Range(n, "false_alert_every", path, every, 2.0, false, 100000.0, false);
    r.Range(n, "clear_fraction", path, clear_fraction, 0.0, true, 1.0, false);
  } else {
    if (!n["limit"].IsDefined()) {
      r.Add(n, path, "a rule needs a 'limit' or a 'false_alert_every' budget");
    } else if (sig == SignalKind::kTrigg) {
      r.Range(n, "limit", path, rule.limit, 0.0, true, 1.0, true);
    } else {
      r.Range(n, "limit", path, rule.limit, 0.0, true, 1e6, false);
    }
    if (n["clear_fraction"].IsDefined())
      r.Add(n["clear_fraction"], path + ".clear_fraction",
            "'clear_fraction' goes with 'false_alert_every'; give 'clear'");
    rule.clear = rule.limit;
    r.Range(n, "clear", path, rule.clear, 0.0, false, 1e6, false);
    if (rule.clear > rule.limit && n["clear"].IsDefined())
      r.Add(n["clear"], path + ".clear",
            "must not exceed the limit (it is the level below which "
            "the rule stops holding)");
  }
  long persistence = 1;
  r.Int(n, "persistence", path, persistence, 1, 10000);
  rule.persistence = static_cast<int>(persistence);
  if (sig == SignalKind::kAlphaAtCap) {
    if (n["persistence"].IsDefined())
      r.Add(n["persistence"], path + ".persistence", "an alpha_at_cap rule counts its 'periods'");
    rule.limit = rule.clear = 0.5;  // the signal is 1 at the cap, 0 below it
    rule.persistence = static_cast<int>(periods);
  } else if (sig == SignalKind::kStale) {
    rule.limit = rule.clear = static_cast<double>(periods) - 0.5;  // at least `periods` past due
  } else {
    rule.periods = static_cast<int>(periods);
  }
  if (n["direction"].IsDefined() && r.String(n["direction"], path + ".direction", text)) {
    auto d = monitors::ParseDirection(text);
    if (!d)
      r.Add(n["direction"], path + ".direction",
            "must be both, under-forecast or over-forecast, got '" + text + "'");
    else if (*d != monitors::Direction::kBoth &&
             (sig == SignalKind::kAccuracy || sig == SignalKind::kAlphaAtCap ||
              sig == SignalKind::kStale))
      r.Add(n["direction"], path + ".direction", "this signal has no direction; leave it out");
    else
      rule.direction = *d;
  }
  for (auto [key, out] : {std::pair{"severity", &rule.severity},
                          std::pair{"escalate_severity", &rule.escalate_severity}})
    if (n[key].IsDefined() && r.String(n[key], Reader::Join(path, key), text)) {
      auto s = monitors::ParseSeverity(text);
      if (!s)
        r.Add(n[key], Reader::Join(path, key),
              "must be info, warning or critical, got '" + text + "'");
      else
        *out = *s;
    }
  if (n["escalate_limit"].IsDefined() && takes_limit) {
    double e = 0;
    r.Range(n, "escalate_limit", path, e, 0.0, true, 1e6, false);
    rule.escalate_limit = e;
    if (!calibrated && e <= rule.limit)
      r.Add(n["escalate_limit"], path + ".escalate_limit", "must be beyond the limit");
    if (rule.escalate_severity <= rule.severity)
      r.Add(n["escalate_limit"], path + ".escalate_limit",
            "escalate_severity must be above the rule's severity");
  } else if (n["escalate_severity"].IsDefined()) {
    r.Add(n["escalate_severity"], path + ".escalate_severity", "goes with 'escalate_limit'");
  }
  long resolve_after = 1;
  r.Int(n, "resolve_after", path, resolve_after, 1, monitors::kMaxResolveAfter);
  rule.resolve_after = static_cast<int>(resolve_after);
  ok = r.problems().size() == before;
}

void ReadPolicy(Reader& r, const YAML::Node& n, const std::string& path, Policy& p) {
  using monitors::StartKind;

  if (!n.IsMap()) {
    r.Add(n, path, "a policy must be a map");
    return;
  }
  r.CheckKeys(n, path, kPolicyKeys);
  monitors::PolicySpec& s = p.spec;
  std::string text;

  if (!n["name"].IsDefined()) {
    r.Add(n, path, "a policy needs a 'name'");
  } else if (r.String(n["name"], path + ".name", p.name)) {
    bool good = !p.name.empty();
    for (char c : p.name)
      if (!(std::isalnum(static_cast<unsigned char>(c)) || c == '-' || c == '_' || c == '.'))
        good = false;
    if (!good)
      r.Add(n["name"], path + ".name",
            "must be non-empty letters, digits, '-', '_' or '.', got '" + p.name + "'");
  }
  if (!n["match"].IsDefined())
    r.Add(n, path, "a policy needs 'match' (a key glob such as \"north/*\", or \"*\")");
  else
    ReadMatch(r, n["match"], path + ".match", p.match);

  if (!n["period"].IsDefined()) {
    r.Add(n, path, "a policy needs 'period' (day, week or month)");
  } else if (r.String(n["period"], path + ".period", text)) {
    auto k = monitors::ParsePeriodKind(text);
    if (!k)
      r.Add(n["period"], path + ".period", "must be day, week or month, got '" + text + "'");
    else
      p.period = *k;
  }
  if (n["method"].IsDefined() && r.String(n["method"], path + ".method", text)) {
    auto m = monitors::ParseMethod(text);
    if (!m)
      r.Add(n["method"], path + ".method",
            "must be ses, holt, damped, seasonal-add, seasonal-mul, croston or sba, got '" + text +
                "'");
    else
      s.method = *m;
  }
  const Method method = s.method;
  s.constants.alpha = 0.2;
  r.Range(n, "alpha", path, s.constants.alpha, 0.0, false, 1.0, false);
  s.constants.beta = 0.1;
  r.Range(n, "trend_beta", path, s.constants.beta, 0.0, false, 1.0, false);
  s.constants.phi = method == Method::kDamped ? 0.98 : 1.0;
  r.Range(n, "damping", path, s.constants.phi, 0.0, true, 1.0, false);
  s.constants.gamma = 0.1;
  r.Range(n, "season_gamma", path, s.constants.gamma, 0.0, false, 1.0, false);
  long m = 1;
  r.Int(n, "season_length", path, m, 2, 1000);
  s.constants.season_length = static_cast<int>(m);
  if (monitors::IsSeasonal(method) && !n["season_length"].IsDefined())
    r.Add(n, path,
          "method " + std::string(monitors::MethodName(method)) +
              " needs 'season_length' (periods per season, e.g. 52 for weeks in a year)");
  if (!monitors::IsSeasonal(method) && n["season_length"].IsDefined())
    r.Add(n["season_length"], path + ".season_length",
          "only seasonal-add and seasonal-mul use a season_length");
  if (!monitors::HasTrend(method))
    for (const char* key : {"trend_beta", "damping"})
      if (n[key].IsDefined())
        r.Add(n[key], Reader::Join(path, key),
              std::string("method ") + std::string(monitors::MethodName(method)) +
                  " has no trend; remove '" + key + "'");
  if (method == Method::kHolt && n["damping"].IsDefined())
    r.Add(n["damping"], path + ".damping", "holt has no damping; use method damped");

  const YAML::Node adaptive = n["adaptive"];
  if (adaptive.IsDefined()) {
    if (!adaptive.IsMap()) {
      r.Add(adaptive, path + ".adaptive", "must be a map {floor, cap, lag}");
    } else {
      r.CheckKeys(adaptive, path + ".adaptive", kAdaptiveKeys);
      s.adaptive.enabled = true;
      s.adaptive.floor = 0.05;
      s.adaptive.cap = 0.8;
      r.Range(adaptive, "floor", path + ".adaptive", s.adaptive.floor, 0.0, false, 1.0, false);
      r.Range(adaptive, "cap", path + ".adaptive", s.adaptive.cap, 0.0, true, 1.0, false);
      if (s.adaptive.floor > s.adaptive.cap)
        r.Add(adaptive, path + ".adaptive", "floor must not exceed cap");
      if (adaptive["lag"].IsDefined())
        r.Bool(adaptive["lag"], path + ".adaptive.lag", s.adaptive.lagged);
      if (monitors::IsIntermittent(method))
        r.Add(adaptive, path + ".adaptive", "croston and sba do not take an adaptive alpha");
    }
  }

  if (n["start"].IsDefined()) {
    ReadStart(r, n["start"], path + ".start", s.start);
  } else if (monitors::IsSeasonal(method)) {
    s.start.kind = StartKind::kMeanOfFirst;
    s.start.count = 2 * s.constants.season_length;
  }
  if (const YAML::Node ic = n["in_control"]; ic.IsDefined()) {
    const std::string ip = path + ".in_control";
    if (!monitors::IsIntermittent(method)) {
      r.Add(ic, ip,
            "only croston and sba policies take in_control (the demand their limits are "
            "derived on)");
    } else if (!ic.IsMap()) {
      r.Add(ic, ip, "must be a map {demand_probability, size_mean, size_sd}");
    } else {
      r.CheckKeys(ic, ip, kInControlKeys);
      r.Range(ic, "demand_probability", ip, s.in_control.probability, 0.0, true, 1.0, false);
      r.Range(ic, "size_mean", ip, s.in_control.size_mean, 0.0, true, 1e12, false);
      r.Range(ic, "size_sd", ip, s.in_control.size_sd, 0.0, false, 1e12, false);
    }
  }
  const YAML::Node start_node = n["start"].IsDefined() ? n["start"] : n;
  const std::string start_path = path + ".start";
  if (monitors::IsIntermittent(method) && n["start"].IsDefined() &&
      s.start.kind != StartKind::kFirstActual)
    r.Add(start_node, start_path,
          "croston and sba start from the first demand; use first-actual or leave start out");
  if (monitors::IsSeasonal(method)) {
    const int season = s.constants.season_length;
    if (s.start.kind == StartKind::kFirstActual)
      r.Add(start_node, start_path,
            "seasonal methods need seasonal start values: use {mean_of_first: k} with k a "
            "multiple of season_length, {fitted: n} or an explicit season");
    if (s.start.kind == StartKind::kMeanOfFirst && (s.start.count % season != 0))
      r.Add(start_node, start_path,
            "mean_of_first must be a multiple of season_length (" + std::to_string(season) + ")");
    if (s.start.kind == StartKind::kFitted && s.start.count < 2 * season)
      r.Add(start_node, start_path,
            "fitted needs at least two seasons (" + std::to_string(2 * season) + " periods)");
    if (s.start.kind == StartKind::kExplicit &&
        s.start.season.size() != static_cast<std::size_t>(season))
      r.Add(start_node, start_path,
            "an explicit start needs exactly season_length (" + std::to_string(season) +
                ") season values, got " + std::to_string(s.start.season.size()));
  } else if (s.start.kind == StartKind::kExplicit && !s.start.season.empty()) {
    r.Add(start_node, start_path, "season values need a seasonal method");
  }
  if (s.start.kind == StartKind::kFitted && !monitors::IsSeasonal(method)) {
    const int need = monitors::HasTrend(method) ? 4 : 3;
    if (s.start.count < need)
      r.Add(start_node, start_path,
            "fitted needs at least " + std::to_string(need) + " periods for this method");
  }

  r.Range(n, "signal_beta", path, s.signal_beta, 0.0, true, 1.0, false);
  r.Range(n, "initial_mad", path, s.initial_mad, 0.0, false, 1e300, false);
  long warmup = 0;
  r.Int(n, "warmup", path, warmup, 0, 100000);
  s.warmup = static_cast<int>(warmup);
  r.Int(n, "max_gap", path, s.max_gap, 0, 100000);
  if (n["gaps"].IsDefined() && r.String(n["gaps"], path + ".gaps", text)) {
    if (text == "zero")
      s.gaps = monitors::GapRule::kZero;
    else if (text == "skip")
      s.gaps = monitors::GapRule::kSkip;
    else
      r.Add(n["gaps"], path + ".gaps", "must be zero or skip, got '" + text + "'");
  }
  r.Range(n, "coverage", path, s.coverage, 0.0, true, 1.0, true);
  if (n["negative_actuals"].IsDefined() &&
      r.String(n["negative_actuals"], path + ".negative_actuals", text)) {
    if (text == "accept" && !monitors::MethodTakesNegative(method))
      r.Add(n["negative_actuals"], path + ".negative_actuals",
            "method " + std::string(monitors::MethodName(method)) +
                " cannot take negative actuals; only ses, holt, damped and seasonal-add can");
    else if (text == "accept")
      s.accept_negative = true;
    else if (text != "refuse")
      r.Add(n["negative_actuals"], path + ".negative_actuals",
            "must be refuse or accept, got '" + text + "'");
  }
  long history = p.history;
  r.Int(n, "history", path, history, 1, 100000);
  p.history = static_cast<int>(history);
  long stale = p.stale_after;
  r.Int(n, "stale_after", path, stale, 1, 100000);
  p.stale_after = static_cast<int>(stale);
  long top = p.export_top_series;
  r.Int(n, "export_top_series", path, top, 0, 100);
  p.export_top_series = static_cast<int>(top);

  const YAML::Node rules = n["rules"];
  if (rules.IsDefined()) {
    if (!rules.IsSequence()) {
      r.Add(rules, path + ".rules", "must be a list of rules");
    } else {
      std::set<std::string> names;
      struct Budget {
        std::size_t index;
        std::size_t node;
        double every, clear_fraction;
      };
      std::vector<Budget> budgets;
      for (std::size_t i = 0; i < rules.size(); ++i) {
        const std::string rp = path + ".rules[" + std::to_string(i) + "]";
        monitors::RuleSpec rule;
        bool ok = false;
        double every = 0, clear_fraction = 1;
        ReadRule(r, rules[i], rp, rule, every, clear_fraction, ok);
        if (!ok) continue;
        if (!names.insert(rule.name).second) {
          r.Add(rules[i], rp + ".name", "rule name '" + rule.name + "' is used twice");
          continue;
        }
        if (rule.signal == monitors::SignalKind::kAlphaAtCap && !s.adaptive.enabled)
          r.Add(rules[i], rp, "an alpha_at_cap rule needs an adaptive policy");
        if (every > 0) budgets.push_back({s.rules.size(), i, every, clear_fraction});
        s.rules.push_back(rule);
      }
      // Limits from budgets, once the method and constants are known (same inputs: cached).
      std::vector<monitors::RuleBudget> asked;
      asked.reserve(budgets.size());
      for (const Budget& b : budgets) asked.push_back({b.index, b.every, b.clear_fraction});
      const std::vector<monitors::Calibration> derived = monitors::CalibrateRules(s, asked);
      for (std::size_t k = 0; k < budgets.size(); ++k) {
        const Budget& b = budgets[k];
        const std::string rp = path + ".rules[" + std::to_string(b.node) + "]";
        const monitors::Calibration& c = derived[k];
        monitors::RuleSpec& rule = s.rules[b.index];
        if (!c.ok) {
          r.Add(rules[b.node], rp, c.problem);
          continue;
        }
        rule.limit = c.limit;
        rule.clear = b.clear_fraction * c.limit;
        rule.young = c.young;
        if (rule.escalate_limit && *rule.escalate_limit <= rule.limit) {
          std::ostringstream msg;
          msg << "escalate_limit " << *rule.escalate_limit << " is not beyond the derived limit "
              << rule.limit;
          r.Add(rules[b.node]["escalate_limit"], rp + ".escalate_limit", msg.str());
        }
        p.calibrations.push_back({rule.name, b.every, c.limit, c.rate,
                                  monitors::PeriodsPerWeek(p.period) / b.every, c.young,
                                  c.young_rates});
      }
      if (rules.size() > monitors::kMaxRules)
        r.Add(rules, path + ".rules",
              "at most " + std::to_string(monitors::kMaxRules) + " rules per policy");
    }
  }
}

// A Kafka topic name: 1 to 249 of [A-Za-z0-9._-] (Kafka's own rule).
bool TopicName(const std::string& t) {
  if (t.empty() || t.size() > 249) return false;
  for (char c : t)
    if (!(std::isalnum(static_cast<unsigned char>(c)) || c == '.' || c == '_' || c == '-'))
      return false;
  return true;
}

void ReadKafka(Reader& r, const YAML::Node& n, Kafka& k) {
  const std::string path = "kafka";
  if (!n.IsMap()) {
    r.Add(n, path, "must be a map with brokers and topics");
    return;
  }
  r.CheckKeys(n, path, kKafkaKeys);
  if (!n["brokers"].IsDefined() || !r.String(n["brokers"], path + ".brokers", k.brokers) ||
      k.brokers.empty())
    r.Add(n["brokers"].IsDefined() ? n["brokers"] : n, path + ".brokers",
          "Kafka needs 'brokers' (bootstrap servers, \"host:port,host:port\")");
  const YAML::Node topics = n["topics"];
  if (!topics.IsDefined() || !topics.IsSequence() || topics.size() == 0) {
    r.Add(topics.IsDefined() ? topics : n, path + ".topics", "must be a non-empty list of topics");
  } else {
    for (std::size_t i = 0; i < topics.size(); ++i) {
      std::string t;
      const std::string tp = path + ".topics[" + std::to_string(i) + "]";
      if (!r.String(topics[i], tp, t)) continue;
      if (!TopicName(t))
        r.Add(topics[i], tp, "a topic name is 1 to 249 letters, digits, '.', '_' or '-'");
      else
        k.topics.push_back(t);
    }
  }
  if (n["group"].IsDefined() && r.String(n["group"], path + ".group", k.group) && k.group.empty())
    r.Add(n["group"], path + ".group", "must not be empty");
  if (n["format"].IsDefined()) {
    std::string f;
    if (r.String(n["format"], path + ".format", f)) {
      if (f == "csv")
        k.format = Kafka::Format::kCsv;
      else if (f == "ndjson")
        k.format = Kafka::Format::kNdjson;
      else
        r.Add(n["format"], path + ".format", "must be csv or ndjson, got '" + f + "'");
    }
  }
  if (n["dead_letter_topic"].IsDefined() &&
      r.String(n["dead_letter_topic"], path + ".dead_letter_topic", k.dead_letter_topic) &&
      !k.dead_letter_topic.empty() && !TopicName(k.dead_letter_topic))
    r.Add(n["dead_letter_topic"], path + ".dead_letter_topic",
          "a topic name is 1 to 249 letters, digits, '.', '_' or '-'");
  for (const std::string& t : k.topics)
    if (t == k.dead_letter_topic)
      r.Add(n["dead_letter_topic"], path + ".dead_letter_topic",
            "must not be one of the topics consumed");
  if (n["changelog_topic"].IsDefined() &&
      r.String(n["changelog_topic"], path + ".changelog_topic", k.changelog_topic) &&
      !k.changelog_topic.empty()) {
    if (!TopicName(k.changelog_topic))
      r.Add(n["changelog_topic"], path + ".changelog_topic",
            "a topic name is 1 to 249 letters, digits, '.', '_' or '-'");
    else if (k.changelog_topic == k.dead_letter_topic ||
             std::find(k.topics.begin(), k.topics.end(), k.changelog_topic) != k.topics.end())
      r.Add(n["changelog_topic"], path + ".changelog_topic",
            "must differ from the topics consumed and the dead-letter topic");
    else if (k.topics.size() > 1)
      r.Add(n["changelog_topic"], path + ".changelog_topic",
            "instances share series through one source topic: list one topic under "
            "kafka.topics (its partition numbers are the changelog's)");
  }
  if (n["partitioner"].IsDefined()) {
    std::string f;
    if (r.String(n["partitioner"], path + ".partitioner", f)) {
      if (f == "murmur2")
        k.partitioner = Kafka::Partitioner::kMurmur2;
      else if (f == "crc32")
        k.partitioner = Kafka::Partitioner::kCrc32;
      else
        r.Add(n["partitioner"], path + ".partitioner", "must be murmur2 or crc32, got '" + f + "'");
    }
  }
  r.Int(n, "batch_rows", path, k.batch_rows, 1, 200000);
  r.Int(n, "batch_ms", path, k.batch_ms, 1, 60000);
  const YAML::Node props = n["properties"];
  if (props.IsDefined()) {
    if (!props.IsMap()) {
      r.Add(props, path + ".properties", "must be a map of librdkafka properties");
    } else {
      for (auto it = props.begin(); it != props.end(); ++it) {
        const std::string name = it->first.Scalar();
        const std::string pp = path + ".properties." + name;
        std::string value;
        if (!it->second.IsScalar()) {
          r.Add(it->second, pp, "must be a single value");
          continue;
        }
        value = it->second.Scalar();
        if (kKafkaOwnProperties.count(name))
          r.Add(it->first, pp,
                "is set by forewarden (the consumed offsets are kept in its store); use the "
                "kafka keys instead");
        else
          k.properties.emplace_back(name, value);
      }
    }
  }
}

void ReadAlerts(Reader& r, const YAML::Node& n, Alerts& a) {
  const std::string path = "alerts";
  if (!n.IsMap()) {
    r.Add(n, path, "must be a map");
    return;
  }
  r.CheckKeys(n, path, kAlertsKeys);
  r.Int(n, "check_seconds", path, a.check_seconds, 1, 86400);
  r.Int(n, "storm_threshold", path, a.storm_threshold, 0, 10000000);
  r.Int(n, "max_attempts", path, a.max_attempts, 1, 1000000);
  r.Range(n, "initial_backoff_seconds", path, a.initial_backoff_seconds, 0.0, true, 86400.0, false);
  r.Range(n, "max_backoff_seconds", path, a.max_backoff_seconds, 0.0, true, 7 * 86400.0, false);
  if (a.max_backoff_seconds < a.initial_backoff_seconds)
    r.Add(n["max_backoff_seconds"], path + ".max_backoff_seconds",
          "must not be below initial_backoff_seconds");
  r.Int(n, "batch", path, a.batch, 1, 10000);
  r.Int(n, "resend_seconds", path, a.resend_seconds, 1, 86400);
  if (n["public_url"].IsDefined()) r.String(n["public_url"], path + ".public_url", a.public_url);
  const YAML::Node sinks = n["sinks"];
  if (!sinks.IsDefined()) return;
  a.sinks.clear();
  if (!sinks.IsSequence()) {
    r.Add(sinks, path + ".sinks", "must be a list of sinks");
    return;
  }
  std::set<std::string> names;
  for (std::size_t i = 0; i < sinks.size(); ++i) {
    const std::string sp = path + ".sinks[" + std::to_string(i) + "]";
    const YAML::Node k = sinks[i];
    if (!k.IsMap()) {
      r.Add(k, sp, "a sink must be a map with name and type");
      continue;
    }
    r.CheckKeys(k, sp, kSinkKeys);
    Sink sink;
    std::string type;
    if (!k["name"].IsDefined())
      r.Add(k, sp, "a sink needs a 'name'");
    else
      r.String(k["name"], sp + ".name", sink.name);
    if (!sink.name.empty() && !names.insert(sink.name).second)
      r.Add(k["name"], sp + ".name", "sink name '" + sink.name + "' is used twice");
    if (!k["type"].IsDefined()) {
      r.Add(k, sp, "a sink needs a 'type' (webhook, alertmanager, kafka or log)");
    } else if (r.String(k["type"], sp + ".type", type)) {
      if (type == "webhook")
        sink.kind = Sink::Kind::kWebhook;
      else if (type == "alertmanager")
        sink.kind = Sink::Kind::kAlertmanager;
      else if (type == "log")
        sink.kind = Sink::Kind::kLog;
      else if (type == "kafka")
        sink.kind = Sink::Kind::kKafka;
      else
        r.Add(k["type"], sp + ".type",
              "must be webhook, alertmanager, kafka or log, got '" + type + "'");
    }
    for (auto [key, out] :
         {std::pair{"url", &sink.url}, std::pair{"secret_file", &sink.secret_file},
          std::pair{"secret_env", &sink.secret_env}, std::pair{"key_id", &sink.key_id},
          std::pair{"previous_secret_file", &sink.previous_secret_file},
          std::pair{"previous_key_id", &sink.previous_key_id}, std::pair{"ca_file", &sink.ca_file},
          std::pair{"topic", &sink.topic}, std::pair{"brokers", &sink.brokers}})
      if (k[key].IsDefined()) r.String(k[key], Reader::Join(sp, key), *out);
    r.Int(k, "timeout_seconds", sp, sink.timeout_seconds, 1, 3600);
    if (sink.kind == Sink::Kind::kKafka) {
      if (!TopicName(sink.topic))
        r.Add(k["topic"].IsDefined() ? k["topic"] : k, sp + ".topic",
              "a kafka sink needs a topic: 1 to 249 letters, digits, '.', '_' or '-'");
      if (!sink.url.empty()) r.Add(k["url"], sp + ".url", "a kafka sink takes topic, not url");
    } else if (!sink.topic.empty() || !sink.brokers.empty()) {
      r.Add(k, sp, "only kafka sinks take topic and brokers");
    }
    // a kafka sink's brokers: its own, else kafka.brokers (checked once that section is read)
    if (sink.kind == Sink::Kind::kWebhook || sink.kind == Sink::Kind::kAlertmanager) {
      if (sink.url.rfind("http://", 0) != 0 && sink.url.rfind("https://", 0) != 0)
        r.Add(k["url"].IsDefined() ? k["url"] : k, sp + ".url", "needs an http:// or https:// URL");
      if (!sink.ca_file.empty() && sink.url.rfind("https://", 0) != 0)
        r.Add(k["ca_file"], Reader::Join(sp, "ca_file"), "a CA file needs an https:// url");
    } else if (sink.kind == Sink::Kind::kLog && !sink.url.empty()) {
      r.Add(k["url"], sp + ".url", "a log sink takes no url");
    }
    if (sink.kind != Sink::Kind::kWebhook &&
        (!sink.secret_file.empty() || !sink.secret_env.empty()))
      r.Add(k, sp, "only webhook sinks take a secret");
    if (!sink.secret_file.empty() && !sink.secret_env.empty())
      r.Add(k, sp, "give either secret_file or secret_env, not both");
    for (auto [key, id] :
         {std::pair{"key_id", &sink.key_id}, std::pair{"previous_key_id", &sink.previous_key_id}})
      if (id->find_first_of("\"\\") != std::string::npos || id->size() > 200)
        r.Add(k[key], Reader::Join(sp, key),
              "a key id is at most 200 characters without quotes or backslashes");
    if (sink.previous_secret_file.empty() != sink.previous_key_id.empty())
      r.Add(k, sp, "previous_secret_file and previous_key_id come together (key rotation)");
    if (!sink.previous_secret_file.empty() && sink.secret_file.empty() && sink.secret_env.empty())
      r.Add(k, sp, "a previous key needs a current one (secret_file or secret_env)");
    if (!sink.previous_key_id.empty() && sink.previous_key_id == sink.key_id)
      r.Add(k["previous_key_id"], Reader::Join(sp, "previous_key_id"), "must differ from key_id");
    a.sinks.push_back(std::move(sink));
  }
}

void ReadServer(Reader& r, const YAML::Node& n, Server& s) {
  const std::string path = "server";
  if (!n.IsMap()) {
    r.Add(n, path, "must be a map");
    return;
  }
  r.CheckKeys(n, path, kServerKeys);
  for (auto [key, out] :
       {std::pair{"listen", &s.listen}, std::pair{"data", &s.data},
        std::pair{"token_file", &s.token_file}, std::pair{"token_env", &s.token_env},
        std::pair{"folder", &s.folder}, std::pair{"tls_cert_file", &s.tls_cert_file},
        std::pair{"tls_key_file", &s.tls_key_file}, std::pair{"people_file", &s.people_file}})
    if (n[key].IsDefined()) r.String(n[key], Reader::Join(path, key), *out);
  if (n["listen"].IsDefined() && s.listen.rfind(':') == std::string::npos)
    r.Add(n["listen"], path + ".listen", "must be HOST:PORT, got '" + s.listen + "'");
  if (n["synchronous"].IsDefined()) {
    std::string text;
    if (r.String(n["synchronous"], path + ".synchronous", text)) {
      if (text == "full")
        s.synchronous = Synchronous::kFull;
      else if (text == "normal")
        s.synchronous = Synchronous::kNormal;
      else
        r.Add(n["synchronous"], path + ".synchronous",
              "must be full or normal, got '" + text + "'");
    }
  }
  r.Int(n, "max_body_bytes", path, s.max_body_bytes, 1024, 1L << 31);
  r.Int(n, "max_rows_per_batch", path, s.max_rows_per_batch, 1, 10000000);
  r.Int(n, "max_key_bytes", path, s.max_key_bytes, 1, 65536);
  r.Int(n, "max_labels", path, s.max_labels, 0, 1000);
  r.Int(n, "max_label_bytes", path, s.max_label_bytes, 1, 65536);
  r.Int(n, "max_series", path, s.max_series, 1, 1000000000);
  r.Int(n, "max_connections", path, s.max_connections, 1, 100000);
  r.Int(n, "header_timeout_seconds", path, s.header_timeout_seconds, 1, 3600);
  r.Int(n, "idle_timeout_seconds", path, s.idle_timeout_seconds, 1, 86400);
  r.Int(n, "queue_depth", path, s.queue_depth, 1, 100000);
  r.Int(n, "read_queue_depth", path, s.read_queue_depth, 1, 100000);
  r.Int(n, "max_exports", path, s.max_exports, 1, 64);
  r.Int(n, "shutdown_grace_seconds", path, s.shutdown_grace_seconds, 0, 3600);
  r.Int(n, "folder_poll_ms", path, s.folder_poll_ms, 10, 3600000);
  long max_db = static_cast<long>(s.max_database_bytes);
  r.Int(n, "max_database_bytes", path, max_db, 0, 1L << 50);
  s.max_database_bytes = max_db;
  long cache = static_cast<long>(s.cache_bytes);
  r.Int(n, "cache_bytes", path, cache, 1L << 20, 1L << 40);
  s.cache_bytes = cache;
  r.Int(n, "state_flush_seconds", path, s.state_flush_seconds, 0, 3600);
  r.Int(n, "state_flush_series", path, s.state_flush_series, 1, 100000000);
  if (!s.token_file.empty() && !s.token_env.empty())
    r.Add(n, path, "give token_file or token_env, not both");
  for (auto [key, out] : {std::pair{"token_for_reads", &s.token_for_reads},
                          std::pair{"tls_terminated_by_proxy", &s.tls_terminated_by_proxy}}) {
    if (!n[key].IsDefined()) continue;
    std::string text;
    if (!r.String(n[key], Reader::Join(path, key), text)) continue;
    if (text == "true" || text == "false")
      *out = text == "true";
    else
      r.Add(n[key], Reader::Join(path, key), "must be true or false, got '" + text + "'");
  }
  if (s.token_for_reads && s.token_file.empty() && s.token_env.empty() && s.people_file.empty())
    r.Add(n, path, "token_for_reads needs token_file, token_env or people_file");
  if (s.tls_cert_file.empty() != s.tls_key_file.empty())
    r.Add(n, path, "tls_cert_file and tls_key_file come together");
}

}  // namespace

LoadResult LoadSettingsText(const std::string& text, const std::string& name) {
  LoadResult result;
  Reader r(name);
  YAML::Node root;
  try {
    root = YAML::Load(text);
  } catch (const YAML::Exception& e) {
    Problem p;
    p.file = name;
    p.line = e.mark.line >= 0 ? e.mark.line + 1 : 0;
    p.column = e.mark.column >= 0 ? e.mark.column + 1 : 0;
    p.message = "not valid YAML: " + e.msg;
    result.problems.push_back(std::move(p));
    return result;
  }
  if (!root.IsMap()) {
    r.Add(root, "", "the settings file must be a map with a 'policies' list");
    result.problems = std::move(r.problems());
    return result;
  }
  r.CheckKeys(root, "", kTopKeys);
  if (root["server"].IsDefined()) ReadServer(r, root["server"], result.settings.server);
  Sink log_sink;
  log_sink.name = "log";
  log_sink.kind = Sink::Kind::kLog;
  result.settings.alerts.sinks = {log_sink};
  if (root["alerts"].IsDefined()) ReadAlerts(r, root["alerts"], result.settings.alerts);
  if (root["kafka"].IsDefined()) ReadKafka(r, root["kafka"], result.settings.kafka);
  if (!result.settings.kafka.changelog_topic.empty() && !result.settings.server.folder.empty())
    r.Add(root["kafka"]["changelog_topic"], "kafka.changelog_topic",
          "instances sharing series take actuals from Kafka only: remove server.folder");
  for (std::size_t i = 0; i < result.settings.alerts.sinks.size(); ++i) {
    Sink& k = result.settings.alerts.sinks[i];
    if (k.kind != Sink::Kind::kKafka || !k.brokers.empty()) continue;
    k.brokers = result.settings.kafka.brokers;
    if (k.brokers.empty())
      r.Add(root["alerts"], "alerts.sinks[" + std::to_string(i) + "].brokers",
            "a kafka sink needs brokers: its own, or the kafka section's");
  }
  if (root["fallback_policy"].IsDefined())
    r.String(root["fallback_policy"], "fallback_policy", result.settings.fallback_policy);
  const YAML::Node policies = root["policies"];
  if (!policies.IsDefined() || !policies.IsSequence() || policies.size() == 0) {
    r.Add(policies.IsDefined() ? policies : root, "policies",
          "must be a non-empty list of policies");
  } else {
    std::set<std::string> names;
    for (std::size_t i = 0; i < policies.size(); ++i) {
      const std::string path = "policies[" + std::to_string(i) + "]";
      Policy p;
      const std::size_t before = r.problems().size();
      ReadPolicy(r, policies[i], path, p);
      if (!p.name.empty() && !names.insert(p.name).second)
        r.Add(policies[i]["name"], path + ".name", "policy name '" + p.name + "' is used twice");
      if (r.problems().size() == before) result.settings.policies.push_back(std::move(p));
    }
  }
  if (!result.settings.fallback_policy.empty()) {
    bool found = false;
    for (const Policy& p : result.settings.policies)
      found |= p.name == result.settings.fallback_policy;
    if (!found)
      r.Add(root["fallback_policy"], "fallback_policy",
            "names no policy: '" + result.settings.fallback_policy + "'");
  }
  result.problems = std::move(r.problems());
  return result;
}

std::vector<std::string> SettingsKeys() {
  std::vector<std::string> out;
  const std::pair<const char*, const std::set<std::string>*> sections[] = {
      {"", &kTopKeys},
      {"server.", &kServerKeys},
      {"policies[].", &kPolicyKeys},
      {"policies[].match.", &kMatchKeys},
      {"policies[].adaptive.", &kAdaptiveKeys},
      {"policies[].in_control.", &kInControlKeys},
      {"policies[].start.", &kStartKeys},
      {"policies[].rules[].", &kRuleKeys},
      {"alerts.", &kAlertsKeys},
      {"alerts.sinks[].", &kSinkKeys},
      {"kafka.", &kKafkaKeys}};
  for (const auto& [prefix, keys] : sections)
    for (const std::string& k : *keys) out.push_back(prefix + k);
  return out;
}

LoadResult LoadSettingsFile(const std::string& path, std::string* text) {
  std::string read;
  LoadResult result;
  if (!ReadConfigFile(path, "settings", read, result.problems)) return result;
  result = LoadSettingsText(read, path);
  if (text) *text = std::move(read);
  return result;
}

}  // namespace config
