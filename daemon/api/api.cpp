#include "daemon/api/api.h"

#include <algorithm>
#include <chrono>
#include <cstring>
#include <cmath>
#include <ctime>
#include <nlohmann/json.hpp>

#include "daemon/batch/parse.h"
#include "daemon/common/iso_time.h"
#include "daemon/store/alert_reads.h"
#include "daemon/observe/metrics.h"
#include "monitors/interval.h"

namespace forewarden {

using nlohmann::json;

std::string UrlDecode(std::string_view text, bool query) {
  std::string out;
  out.reserve(text.size());
  for (std::size_t i = 0; i < text.size(); ++i) {
    const char c = text[i];
    if (c == '%' && i + 2 < text.size() &&
        std::isxdigit(static_cast<unsigned char>(text[i + 1])) &&
        std::isxdigit(static_cast<unsigned char>(text[i + 2]))) {
      out += static_cast<char>(std::stoi(std::string(text.substr(i + 1, 2)), nullptr, 16));
      i += 2;
    } else if (c == '+' && query) {
      out += ' ';
    } else {
      out += c;
    }
  }
  return out;
}

namespace {

HttpResponse Json(int status, const json& body) {
  HttpResponse r;
  r.status = status;
  // Invalid UTF-8 (a path or key echoed back) is replaced, never thrown: found by the HTTP
  // fuzz target (tests/fuzz/regressions, http-invalid-utf8-path).
  r.body = body.dump(-1, ' ', false, json::error_handler_t::replace) + "\n";
  return r;
}

HttpResponse Error(int status, const std::string& message) {
  return Json(status, json{{"error", message}});
}

HttpResponse Unauthorized() {
  HttpResponse r = Error(401, "a bearer token is required for this endpoint");
  r.headers.emplace_back("WWW-Authenticate", "Bearer");
  return r;
}

json Number(std::optional<double> v) {
  if (!v || !std::isfinite(*v)) return nullptr;
  return *v;
}

// Splits "path?a=1&b=2" into the path and decoded query pairs.
void SplitTarget(const std::string& target, std::string& path,
                 std::vector<std::pair<std::string, std::string>>& query) {
  const std::size_t q = target.find('?');
  path = target.substr(0, q);
  if (q == std::string::npos) return;
  std::string_view rest(target);
  rest.remove_prefix(q + 1);
  while (!rest.empty()) {
    const std::size_t amp = rest.find('&');
    const std::string_view part = rest.substr(0, amp);
    const std::size_t eq = part.find('=');
    query.emplace_back(UrlDecode(part.substr(0, eq), true),
                       eq == std::string_view::npos ? "" : UrlDecode(part.substr(eq + 1), true));
    if (amp == std::string_view::npos) break;
    rest.remove_prefix(amp + 1);
  }
}

std::string Status(const SeriesView& v) { return StatusName(StatusOf(*v.state, *v.spec, v.stale)); }

std::optional<double> Signal(const SeriesView& v, bool trigg) {
  if (Warming(*v.state, *v.spec)) return std::nullopt;
  return trigg ? monitors::TriggSignal(v.state->stats) : monitors::CusumSignal(v.state->stats);
}

json Alerts(const config::Policy& p, std::uint64_t active) {
  json list = json::array();
  for (std::size_t i = 0; i < p.spec.rules.size(); ++i)
    if (active >> i & 1)
      list.push_back({{"rule", p.spec.rules[i].name},
                      {"signal", monitors::SignalKindName(p.spec.rules[i].signal)},
                      {"severity", monitors::SeverityName(p.spec.rules[i].severity)}});
  return list;
}

json SeriesSummary(const SeriesView& v) {
  const monitors::SeriesState& s = *v.state;
  const monitors::PolicySpec& spec = v.spec->spec;
  json out{{"key", v.key},
           {"policy", v.policy},
           {"status", Status(v)},
           {"last_period", s.seen ? json(monitors::FormatPeriod(v.spec->period, s.last_period)) : json(nullptr)}};
  std::optional<double> f;
  if (s.started) f = monitors::ForecastNext(spec.method, monitors::EffectiveConstants(spec, s), s.model, s.next_index);
  out["forecast"] = Number(f);
  out["trigg_signal"] = Number(Signal(v, true));
  out["cusum_signal"] = Number(Signal(v, false));
  out["alerts"] = Alerts(*v.spec, s.active);
  return out;
}

json SeriesDetail(const SeriesView& v) {
  json out = SeriesSummary(v);
  const monitors::SeriesState& s = *v.state;
  const monitors::PolicySpec& spec = v.spec->spec;
  out["labels"] = json::parse(v.labels, nullptr, false);
  out["stale"] = v.stale;
  out["next_period"] = s.seen ? json(monitors::FormatPeriod(v.spec->period, s.last_period + 1)) : json(nullptr);
  std::optional<double> lower, upper;
  if (out["forecast"].is_number() && s.stats.mad > 0) {
    const double f = out["forecast"].get<double>();
    const double hw = monitors::IntervalHalfWidth(spec.coverage, s.stats.mad);
    lower = f - hw;
    upper = f + hw;
  }
  out["lower"] = Number(lower);
  out["upper"] = Number(upper);
  out["coverage"] = spec.coverage;
  out["method"] = monitors::MethodName(spec.method);
  out["alpha"] = s.alpha;
  out["smoothed_error"] = s.stats.smoothed_error;
  out["mad"] = s.stats.mad;
  out["cusum"] = s.stats.cusum;
  out["periods"] = s.next_index;
  out["forecasts"] = s.forecasts;
  out["missing_periods"] = s.missing;
  return out;
}

bool ConstantTimeEqual(const std::string& a, const std::string& b) {
  unsigned char diff = a.size() == b.size() ? 0 : 1;
  const std::size_t n = std::max(a.size(), b.size());
  for (std::size_t i = 0; i < n; ++i) {
    const unsigned char x = i < a.size() ? static_cast<unsigned char>(a[i]) : 0;
    const unsigned char y = i < b.size() ? static_cast<unsigned char>(b[i]) : 0;
    diff |= static_cast<unsigned char>(x ^ y);
  }
  return diff == 0;
}

bool ParseDateParam(const monitors::PeriodKind kind, const std::string& text, std::int64_t& out,
                    std::string& error) {
  const monitors::PeriodParse p = monitors::ParsePeriod(kind, text);
  if (!p.ok()) {
    error = p.error;
    return false;
  }
  out = p.ordinal;
  return true;
}

}  // namespace

Api::Api(Engine& engine, std::shared_ptr<const config::Settings> settings, std::string token,
         Metrics* metrics)
    : engine_(engine), metrics_(metrics), settings_(std::move(settings)), token_(std::move(token)) {}

namespace {

// The route label of a request path: a fixed set, never a series key or an id.
const char* RouteOf(const std::string& path) {
  static const char* kExact[] = {"/v1/actuals", "/v1/series", "/v1/policies", "/v1/alerts",
                                 "/v1/deliveries", "/v1/deliveries/retry", "/metrics", "/healthz",
                                 "/readyz"};
  for (const char* r : kExact)
    if (path == r) return r;
  auto ends = [&](const char* suffix) {
    const std::size_t n = std::strlen(suffix);
    return path.size() > n && path.compare(path.size() - n, n, suffix) == 0;
  };
  if (path.rfind("/v1/series/", 0) == 0) {
    if (ends("/history")) return "/v1/series/{key}/history";
    if (ends("/reset")) return "/v1/series/{key}/reset";
    return "/v1/series/{key}";
  }
  if (path.rfind("/v1/alerts/", 0) == 0) {
    if (ends("/acknowledge")) return "/v1/alerts/{id}/acknowledge";
    if (ends("/snooze")) return "/v1/alerts/{id}/snooze";
    if (ends("/resolve")) return "/v1/alerts/{id}/resolve";
    return "/v1/alerts/{id}";
  }
  return "other";
}

}  // namespace

void Api::Update(std::shared_ptr<const config::Settings> settings, std::string token) {
  std::lock_guard lock(mu_);
  settings_ = std::move(settings);
  token_ = std::move(token);
}

std::shared_ptr<const config::Settings> Api::settings() const {
  std::lock_guard lock(mu_);
  return settings_;
}

bool Api::Authorized(const HttpRequest& request) {
  std::string token;
  {
    std::lock_guard lock(mu_);
    token = token_;
  }
  if (token.empty()) return true;
  const std::string prefix = "Bearer ";
  const bool ok = request.authorization.rfind(prefix, 0) == 0 &&
                  ConstantTimeEqual(request.authorization.substr(prefix.size()), token);
  if (!ok) counters_.rejected_unauthorized.fetch_add(1);
  return ok;
}

void Api::Handle(HttpRequest&& request, Respond respond) {
  if (!metrics_) return Route(std::move(request), std::move(respond));
  std::string path = request.target.substr(0, request.target.find('?'));
  const char* route = RouteOf(path);
  Route(std::move(request), [this, route, respond = std::move(respond)](HttpResponse r) {
    metrics_->CountRequest(route, r.status);
    respond(std::move(r));
  });
}

void Api::Route(HttpRequest&& request, Respond respond) {
  std::string path;
  std::vector<std::pair<std::string, std::string>> query;
  SplitTarget(request.target, path, query);
  auto param = [&](const char* name) -> std::optional<std::string> {
    for (auto& [k, v] : query)
      if (k == name) return v;
    return std::nullopt;
  };
  const bool get = request.method == "GET", post = request.method == "POST";

  if (path == "/healthz") {
    if (!get) return respond(Error(405, "use GET"));
    return respond(Json(200, {{"alive", true}}));
  }
  if (path == "/readyz") {
    if (!get) return respond(Error(405, "use GET"));
    const std::string failure = engine_.failure();
    if (!failure.empty()) return respond(Json(503, {{"ready", false}, {"reason", failure}}));
    return respond(Json(200, {{"ready", true}}));
  }
  if (path == "/metrics") {
    if (!get) return respond(Error(405, "use GET"));
    if (!metrics_) return respond(Error(404, "metrics are not enabled"));
    const bool queued = engine_.Post([this, respond] {
      HttpResponse r;
      r.content_type = "text/plain; version=0.0.4; charset=utf-8";
      r.body = metrics_->Render(engine_.Snapshot());
      respond(std::move(r));
    });
    if (!queued) respond(Error(503, "the engine is busy; retry later"));
    return;
  }
  if (path == "/v1/actuals") {
    if (!post) return respond(Error(405, "use POST"));
    if (!Authorized(request)) return respond(Unauthorized());
    return Ingest(std::move(request), std::move(respond));
  }
  if (path == "/v1/policies") {
    if (!get) return respond(Error(405, "use GET"));
    const bool queued = engine_.Post([this, respond] {
      json list = json::array();
      std::unordered_map<std::string, long> counts;
      engine_.ForEachSeries([&](const SeriesView& v) { ++counts[v.policy]; });
      for (const config::Policy& p : engine_.settings().policies) {
        json labels = json::object();
        for (auto& [k, v] : p.match.labels) labels[k] = v;
        json rules = json::array();
        for (const auto& r : p.spec.rules) {
          json rule{{"name", r.name},
                    {"signal", monitors::SignalKindName(r.signal)},
                    {"limit", r.limit},
                    {"clear", r.clear},
                    {"persistence", r.persistence},
                    {"direction", monitors::DirectionName(r.direction)},
                    {"severity", monitors::SeverityName(r.severity)},
                    {"resolve_after", r.resolve_after}};
          if (r.periods > 0) rule["periods"] = r.periods;
          if (r.escalate_limit)
            rule["escalate"] = {{"limit", *r.escalate_limit},
                                {"severity", monitors::SeverityName(r.escalate_severity)}};
          for (const auto& c : p.calibrations)
            if (c.rule == r.name)
              rule["calibration"] = {
                  {"false_alert_every", c.every},
                  {"derived_limit", c.limit},
                  {"simulated_rate", c.rate},
                  {"expected_false_alerts_per_week", c.per_series_week * static_cast<double>(counts[p.name])}};
          rules.push_back(std::move(rule));
        }
        const std::int64_t last = engine_.LastArrival(p.name);
        list.push_back({{"name", p.name},
                        {"match", {{"key", p.match.key}, {"labels", labels}}},
                        {"period", monitors::PeriodKindName(p.period)},
                        {"method", monitors::MethodName(p.spec.method)},
                        {"history", p.history},
                        {"stale_after", p.stale_after},
                        {"series", counts[p.name]},
                        {"last_actual_at", last ? json(IsoTime(last)) : json(nullptr)},
                        {"rules", rules}});
      }
      respond(Json(200, {{"policies", list}}));
    });
    if (!queued) respond(Error(503, "the engine is busy; retry later"));
    return;
  }
  if (path == "/v1/series") {
    if (!get) return respond(Error(405, "use GET"));
    long limit = 100, offset = 0;
    try {
      if (auto v = param("limit")) limit = std::stol(*v);
      if (auto v = param("offset")) offset = std::stol(*v);
    } catch (const std::exception&) {
      return respond(Error(400, "limit and offset must be whole numbers"));
    }
    if (limit < 1 || limit > 10000 || offset < 0)
      return respond(Error(400, "limit must be 1..10000 and offset >= 0"));
    const std::string policy = param("policy").value_or("");
    const std::string status = param("status").value_or("");
    const std::string sort = param("sort").value_or("key");
    const std::string label = param("label").value_or("");
    if (!status.empty() && status != "ok" && status != "alerting" && status != "stale" && status != "warming")
      return respond(Error(400, "status must be ok, alerting, stale or warming"));
    if (sort != "key" && sort != "trigg" && sort != "cusum")
      return respond(Error(400, "sort must be key, trigg or cusum (largest absolute signal first)"));
    std::string label_name, label_value;
    if (!label.empty()) {
      const std::size_t colon = label.find(':');
      if (colon == std::string::npos) return respond(Error(400, "label must be name:value"));
      label_name = label.substr(0, colon);
      label_value = label.substr(colon + 1);
    }
    const bool queued = engine_.Post([=, this] {
      // Filter and sort light entries; JSON is built for the requested page only.
      struct Entry {
        SeriesView view;
        double order;  // |signal| (-1 when undefined) for sort=trigg|cusum
      };
      std::vector<Entry> rows;
      std::unordered_map<const char*, bool> label_match;  // label sets are interned: one parse each
      engine_.ForEachSeries([&](const SeriesView& v) {
        if (!policy.empty() && v.policy != policy) return;
        if (!status.empty() && Status(v) != status) return;
        if (!label_name.empty()) {
          auto cached = label_match.find(v.labels.data());
          if (cached == label_match.end()) {
            json labels = json::parse(v.labels, nullptr, false);
            auto it = labels.is_object() ? labels.find(label_name) : labels.end();
            const bool ok = labels.is_object() && it != labels.end() && *it == label_value;
            cached = label_match.emplace(v.labels.data(), ok).first;
          }
          if (!cached->second) return;
        }
        double order = -1;
        if (sort != "key") {
          const std::optional<double> sig = Signal(v, sort == "trigg");
          if (sig) order = std::fabs(*sig);
        }
        rows.push_back({v, order});
      });
      auto before = [&](const Entry& a, const Entry& b) {
        if (sort != "key" && a.order != b.order) return a.order > b.order;
        return a.view.key < b.view.key;
      };
      const std::size_t end = std::min(rows.size(), static_cast<std::size_t>(offset + limit));
      if (end < rows.size())
        std::partial_sort(rows.begin(), rows.begin() + static_cast<long>(end), rows.end(), before);
      else
        std::sort(rows.begin(), rows.end(), before);
      json page = json::array();
      for (std::size_t i = static_cast<std::size_t>(offset); i < end; ++i)
        page.push_back(SeriesSummary(rows[i].view));
      respond(Json(200, {{"total", rows.size()}, {"offset", offset}, {"limit", limit}, {"series", page}}));
    });
    if (!queued) respond(Error(503, "the engine is busy; retry later"));
    return;
  }
  if (path == "/v1/alerts" || path.rfind("/v1/alerts/", 0) == 0)
    return Alerts(path, query, std::move(request), std::move(respond));
  if (path == "/v1/deliveries" || path == "/v1/deliveries/retry")
    return Deliveries(path, query, std::move(request), std::move(respond));
  const std::string prefix = "/v1/series/";
  if (path.rfind(prefix, 0) == 0 && path.size() > prefix.size()) {
    std::string rest = path.substr(prefix.size());
    std::string action;
    for (const char* suffix : {"/history", "/reset"}) {
      const std::string s(suffix);
      if (rest.size() > s.size() && rest.compare(rest.size() - s.size(), s.size(), s) == 0) {
        action = s.substr(1);
        rest.resize(rest.size() - s.size());
        break;
      }
    }
    const std::string key = UrlDecode(rest, false);
    if (action == "reset") {
      if (!post) return respond(Error(405, "use POST"));
      if (!Authorized(request)) return respond(Unauthorized());
      return Reset(key, std::move(request), std::move(respond));
    }
    if (!get) return respond(Error(405, "use GET"));
    const std::string from = param("from").value_or(""), to = param("to").value_or("");
    const bool queued = engine_.Post([=, this] {
      auto v = engine_.FindSeries(key);
      if (!v) return respond(Error(404, "no series '" + key + "'"));
      if (action.empty()) return respond(Json(200, SeriesDetail(*v)));
      std::int64_t lo = INT64_MIN, hi = INT64_MAX;
      std::string error;
      if (!from.empty() && !ParseDateParam(v->spec->period, from, lo, error))
        return respond(Error(400, "from: " + error));
      if (!to.empty() && !ParseDateParam(v->spec->period, to, hi, error))
        return respond(Error(400, "to: " + error));
      const config::Policy& policy = *v->spec;
      std::vector<HistoryRow> rows;
      if (!engine_.History(key, lo, hi, rows, error)) return respond(Error(503, error));
      json out = json::array();
      for (const HistoryRow& h : rows) {
        const monitors::StepResult& r = h.result;
        json row{{"period", monitors::FormatPeriod(policy.period, h.period)},
                 {"actual", h.observed ? json(h.actual) : json(nullptr)},
                 {"filled", !h.observed}};
        if (h.observed) {
          row["forecast"] = r.has_forecast ? json(r.forecast) : json(nullptr);
          row["error"] = r.has_forecast ? json(r.error) : json(nullptr);
          row["alpha"] = r.alpha;
          row["smoothed_error"] = r.stats.smoothed_error;
          row["mad"] = r.stats.mad;
          row["cusum"] = r.stats.cusum;
          row["trigg_signal"] = Number(r.trigg);
          row["cusum_signal"] = Number(r.cusum);
          row["lower"] = Number(r.lower);
          row["upper"] = Number(r.upper);
          json names = json::array();
          for (std::size_t i = 0; i < policy.spec.rules.size(); ++i)
            if (r.active >> i & 1) names.push_back(policy.spec.rules[i].name);
          row["alerts"] = names;
        }
        out.push_back(std::move(row));
      }
      respond(Json(200, {{"key", key}, {"policy", policy.name}, {"rows", out}}));
    });
    if (!queued) respond(Error(503, "the engine is busy; retry later"));
    return;
  }
  respond(Error(404, "no such endpoint: " + path));
}

void Api::Ingest(HttpRequest&& request, Respond respond) {
  const auto s = settings();
  const std::string type = request.content_type.substr(0, request.content_type.find(';'));
  ParsedBatch batch;
  const IngestLimits limits{s->server.max_rows_per_batch,
                            static_cast<std::size_t>(s->server.max_key_bytes),
                            static_cast<std::size_t>(s->server.max_labels),
                            static_cast<std::size_t>(s->server.max_label_bytes)};
  if (type == "text/csv") {
    batch = ParseCsvBatch(request.body, limits);
  } else if (type == "application/x-ndjson") {
    batch = ParseNdjsonBatch(request.body, limits);
  } else {
    counters_.rejected_media_type.fetch_add(1);
    return respond(Error(415, "send text/csv (series,period,value) or application/x-ndjson"));
  }
  if (batch.too_many_rows) {
    counters_.rejected_too_many_rows.fetch_add(1);
    return respond(Error(413, "more than max_rows_per_batch (" +
                                  std::to_string(s->server.max_rows_per_batch) + ") rows"));
  }
  auto problems_json = [](const std::vector<RowProblem>& problems, long count) {
    json list = json::array();
    for (const RowProblem& p : problems)
      list.push_back({{"line", p.line}, {"field", p.field}, {"message", p.message}});
    return json{{"error", "the batch was rejected; nothing was applied"},
                {"problem_count", count},
                {"problems", list}};
  };
  if (batch.problem_count) {
    counters_.rejected_bad_input.fetch_add(1);
    counters_.rejected_rows.fetch_add(batch.data_rows);
    counters_.rejected_batches.fetch_add(1);
    return respond(Json(400, problems_json(batch.problems, batch.problem_count)));
  }
  const auto received = std::chrono::steady_clock::now();
  const std::size_t rows = batch.rows.size();
  const bool queued = engine_.Submit(std::move(batch.rows), [this, respond, problems_json, received, rows](IngestReply r) {
    switch (r.status) {
      case IngestReply::Status::kOk:
        if (metrics_)
          metrics_->ObserveBatch(rows, std::chrono::duration<double>(std::chrono::steady_clock::now() - received).count());
        return respond(Json(200, {{"rows", r.counts.rows},
                                  {"applied", r.counts.applied},
                                  {"unchanged", r.counts.unchanged},
                                  {"restated", r.counts.restated},
                                  {"gap_periods_filled", r.counts.filled},
                                  {"new_series", r.counts.new_series},
                                  {"alerts_opened", r.counts.alerts_opened},
                                  {"alerts_resolved", r.counts.alerts_resolved}}));
      case IngestReply::Status::kRejected:
        counters_.rejected_bad_input.fetch_add(1);
        return respond(Json(400, problems_json(r.problems, r.problem_count)));
      case IngestReply::Status::kUnavailable: {
        counters_.rejected_unavailable.fetch_add(1);
        HttpResponse out = Error(503, "the store is failing; nothing was applied: " + r.error);
        return respond(std::move(out));
      }
    }
  });
  if (!queued) {
    counters_.rejected_queue_full.fetch_add(1);
    HttpResponse out = Error(503, "the engine queue is full; retry later");
    out.headers.emplace_back("Retry-After", "1");
    respond(std::move(out));
  }
}

namespace {

json DeliveryRows(Db& db, std::int64_t event) {
  json out = json::array();
  Stmt q = db.Prepare("SELECT sink, state, attempts, last_error FROM deliveries WHERE event_id = ?1 ORDER BY sink");
  if (!q.valid() || !q.Bind(1, event).Step()) return out;
  for (; q.Row(); q.Step())
    out.push_back({{"sink", std::string(q.Text(0))}, {"state", std::string(q.Text(1))},
                   {"attempts", q.Int(2)},
                   {"last_error", q.IsNull(3) ? json(nullptr) : json(std::string(q.Text(3)))}});
  return out;
}

}  // namespace

void Api::Alerts(const std::string& path, const Query& query, HttpRequest&& request, Respond respond) {
  auto param = [&](const char* name) -> std::string {
    for (auto& [k, v] : query)
      if (k == name) return v;
    return "";
  };
  const bool get = request.method == "GET", post = request.method == "POST";
  if (path == "/v1/alerts") {
    if (!get) return respond(Error(405, "use GET"));
    long limit = 100;
    std::int64_t before = INT64_MAX;
    try {
      if (!param("limit").empty()) limit = std::stol(param("limit"));
      if (!param("before").empty()) before = std::stoll(param("before"));
    } catch (const std::exception&) {
      return respond(Error(400, "limit and before must be whole numbers"));
    }
    if (limit < 1 || limit > 1000) return respond(Error(400, "limit must be 1..1000"));
    const std::string state = param("state");
    if (!state.empty() && state != "open" && state != "acknowledged" && state != "snoozed" &&
        state != "resolved" && state != "unresolved")
      return respond(Error(400, "state must be open, acknowledged, snoozed, resolved or unresolved"));
    const std::string severity = param("severity");
    if (!severity.empty() && !monitors::ParseSeverity(severity))
      return respond(Error(400, "severity must be info, warning or critical"));
    std::string group = param("group");
    if (!group.empty() && group.find_first_not_of("0123456789") != std::string::npos)
      return respond(Error(400, "group must be a whole number"));
    // Fixed SQL fragments; every value is bound.
    std::string sql = "SELECT id FROM alerts WHERE id < ?1";
    std::vector<std::string> values;
    auto filter = [&](const std::string& value, const char* column) {
      if (value.empty()) return;
      values.push_back(value);
      sql += std::string(" AND ") + column + " = ?" + std::to_string(values.size() + 1);
    };
    if (state == "unresolved")
      sql += " AND state != 'resolved'";
    else
      filter(state, "state");
    filter(param("policy"), "policy");
    filter(param("rule"), "rule");
    filter(severity, "severity");
    if (!param("series").empty()) {  // through the series' id (indexed), not its key
      values.push_back(param("series"));
      sql += " AND series_id = (SELECT id FROM series WHERE key = ?" + std::to_string(values.size() + 1) + ")";
    }
    filter(group, "CAST(group_id AS TEXT)");
    sql += " ORDER BY id DESC LIMIT " + std::to_string(limit + 1);
    const bool queued = engine_.Post([=, this] {
      Db& db = engine_.db();
      Stmt q = db.Prepare(sql);
      if (!q.valid()) return respond(Error(503, db.error()));
      q.Bind(1, before);
      for (std::size_t i = 0; i < values.size(); ++i) q.Bind(static_cast<int>(i + 2), values[i]);
      std::vector<std::int64_t> ids;
      if (!q.Step()) return respond(Error(503, db.error()));
      for (; q.Row(); q.Step()) ids.push_back(q.Int(0));
      const bool more = static_cast<long>(ids.size()) > limit;
      if (more) ids.pop_back();
      json list = json::array();
      for (std::int64_t id : ids) {
        std::string text, error;
        if (!AlertJson(db, id, text, error)) return respond(Error(503, error));
        list.push_back(json::parse(text));
      }
      respond(Json(200, {{"alerts", list},
                         {"next_before", more ? json(ids.back()) : json(nullptr)}}));
    });
    if (!queued) respond(Error(503, "the engine is busy; retry later"));
    return;
  }
  // /v1/alerts/{id}[/acknowledge|/snooze|/resolve]
  std::string rest = path.substr(std::string("/v1/alerts/").size());
  std::string action;
  if (const std::size_t slash = rest.find('/'); slash != std::string::npos) {
    action = rest.substr(slash + 1);
    rest.resize(slash);
  }
  if (rest.empty() || rest.size() > 18 || rest.find_first_not_of("0123456789") != std::string::npos)
    return respond(Error(404, "no such alert: " + rest));
  const std::int64_t id = std::stoll(rest);
  if (action.empty()) {
    if (!get) return respond(Error(405, "use GET"));
    const bool queued = engine_.Post([=, this] {
      Db& db = engine_.db();
      std::string text, error;
      if (!AlertJson(db, id, text, error))
        return respond(Error(error.rfind("no alert", 0) == 0 ? 404 : 503, error));
      json alert = json::parse(text);
      json history = json::array();
      Stmt q = db.Prepare(
          "SELECT id, kind, at_ms, actor, note FROM alert_events WHERE alert_id = ?1 ORDER BY id");
      if (!q.valid() || !q.Bind(1, id).Step()) return respond(Error(503, db.error()));
      std::vector<std::int64_t> events;
      for (; q.Row(); q.Step()) {
        history.push_back({{"event", q.Int(0)},
                           {"kind", std::string(q.Text(1))},
                           {"at", IsoTime(q.Int(2))},
                           {"by", q.IsNull(3) ? json(nullptr) : json(std::string(q.Text(3)))},
                           {"note", q.IsNull(4) ? json(nullptr) : json(std::string(q.Text(4)))}});
        events.push_back(q.Int(0));
      }
      q.Reset();
      for (std::size_t i = 0; i < events.size(); ++i) history[i]["deliveries"] = DeliveryRows(db, events[i]);
      alert["history"] = history;
      respond(Json(200, alert));
    });
    if (!queued) respond(Error(503, "the engine is busy; retry later"));
    return;
  }
  if (action != "acknowledge" && action != "snooze" && action != "resolve")
    return respond(Error(404, "no such endpoint: " + path));
  if (!post) return respond(Error(405, "use POST"));
  if (!Authorized(request)) return respond(Unauthorized());
  json body = json::parse(request.body, nullptr, false);
  if (body.is_discarded() || !body.is_object())
    return respond(Error(400, "the body must be a JSON object such as {\"by\": \"name\", \"note\": \"...\"}"));
  if (!body.contains("by") || !body["by"].is_string() || body["by"].get<std::string>().empty())
    return respond(Error(400, "field by: say who does this (kept in the alert's history)"));
  const std::string by = body["by"].get<std::string>();
  if (body.contains("note") && !body["note"].is_string())
    return respond(Error(400, "field note: must be a string"));
  const std::string note = body.value("note", "");
  std::string until;
  std::optional<std::int64_t> until_ms;
  if (action == "snooze") {
    if (!body.contains("until") || !body["until"].is_string())
      return respond(Error(400, "field until: a period of the series' policy (2026-W50, 2026-12, 2026-12-05) or an ISO 8601 time (2026-12-05T10:00:00Z)"));
    until = body["until"].get<std::string>();
    std::int64_t ms = 0;
    if (until.find('T') != std::string::npos) {
      if (!ParseIsoTime(until, ms)) return respond(Error(400, "field until: not an ISO 8601 time with Z or an offset: " + until));
      until_ms = ms;
    }
  }
  const bool queued = engine_.Post([=, this] {
    int status = 200;
    std::string error;
    engine_.AlertAction(
        [&](AlertBook& book, std::int64_t now, int& st, std::string& err) {
          if (action == "acknowledge") return book.Acknowledge(id, by, note, now, st, err);
          if (action == "resolve") return book.ResolveByHand(id, by, note, now, st, err);
          std::optional<std::int64_t> until_period;
          if (!until_ms) {
            // a period of the alert's policy
            std::string policy_name;
            Stmt q = engine_.db().Prepare("SELECT policy FROM alerts WHERE id = ?1");
            if (q.valid() && q.Bind(1, id).Step() && q.Row()) policy_name = std::string(q.Text(0));
            const config::Policy* policy = nullptr;
            for (const auto& p : engine_.settings().policies)
              if (p.name == policy_name) policy = &p;
            if (!policy) {
              st = 404;
              err = "no alert " + std::to_string(id) + " of a known policy";
              return false;
            }
            const monitors::PeriodParse parsed = monitors::ParsePeriod(policy->period, until);
            if (!parsed.ok()) {
              st = 400;
              err = "field until: " + parsed.error;
              return false;
            }
            until_period = parsed.ordinal;
          } else if (*until_ms <= now) {
            st = 400;
            err = "field until: the time has passed";
            return false;
          }
          return book.Snooze(id, until_period, until, until_ms, by, note, now, st, err);
        },
        status, error);
    if (status != 200) return respond(Error(status, error));
    std::string text;
    if (!AlertJson(engine_.db(), id, text, error)) return respond(Error(503, error));
    respond(Json(200, json::parse(text)));
  });
  if (!queued) respond(Error(503, "the engine is busy; retry later"));
}

void Api::Deliveries(const std::string& path, const Query& query, HttpRequest&& request, Respond respond) {
  std::string state = "dead", sink;
  for (auto& [k, v] : query) {
    if (k == "state") state = v;
    if (k == "sink") sink = v;
  }
  if (state != "dead" && state != "pending" && state != "delivered")
    return respond(Error(400, "state must be dead, pending or delivered"));
  if (path == "/v1/deliveries/retry") {
    if (request.method != "POST") return respond(Error(405, "use POST"));
    if (!Authorized(request)) return respond(Unauthorized());
    const bool queued = engine_.Post([=, this] {
      int status = 200;
      std::string error;
      long changed = 0;
      engine_.AlertAction(
          [&](AlertBook&, std::int64_t now, int& st, std::string& err) {
            Stmt q = engine_.db().Prepare(
                "UPDATE deliveries SET state = 'pending', attempts = 0, next_ms = ?1 "
                "WHERE state = 'dead' AND (?2 = '' OR sink = ?2)");
            if (!q.valid() || !q.Bind(1, now).Bind(2, sink).Run()) {
              st = 500;
              err = engine_.db().error();
              return false;
            }
            changed = engine_.db().Changes();
            return true;
          },
          status, error);
      if (status != 200) return respond(Error(status, error));
      respond(Json(200, {{"requeued", changed}}));
    });
    if (!queued) respond(Error(503, "the engine is busy; retry later"));
    return;
  }
  if (request.method != "GET") return respond(Error(405, "use GET"));
  const bool queued = engine_.Post([=, this] {
    Db& db = engine_.db();
    Stmt q = db.Prepare(
        "SELECT d.event_id, d.sink, d.state, d.attempts, d.last_error, e.kind, e.alert_id, "
        "e.group_id, e.at_ms FROM deliveries d JOIN alert_events e ON e.id = d.event_id "
        "WHERE d.state = ?1 AND (?2 = '' OR d.sink = ?2) ORDER BY d.event_id LIMIT 1000");
    if (!q.valid() || !q.Bind(1, state).Bind(2, sink).Step()) return respond(Error(503, db.error()));
    json list = json::array();
    for (; q.Row(); q.Step())
      list.push_back({{"event", q.Int(0)},
                      {"sink", std::string(q.Text(1))},
                      {"state", std::string(q.Text(2))},
                      {"attempts", q.Int(3)},
                      {"last_error", q.IsNull(4) ? json(nullptr) : json(std::string(q.Text(4)))},
                      {"kind", std::string(q.Text(5))},
                      {"alert", q.IsNull(6) ? json(nullptr) : json(q.Int(6))},
                      {"group", q.IsNull(7) ? json(nullptr) : json(q.Int(7))},
                      {"at", IsoTime(q.Int(8))}});
    respond(Json(200, {{"deliveries", list}}));
  });
  if (!queued) respond(Error(503, "the engine is busy; retry later"));
}

void Api::Reset(const std::string& key, HttpRequest&& request, Respond respond) {
  json body = json::parse(request.body, nullptr, false);
  if (body.is_discarded() || !body.is_object())
    return respond(Error(400, "the body must be a JSON object such as {\"to\": \"last\", \"who\": \"name\"}"));
  const std::string how = body.value("to", "");
  if (how != "value" && how != "last" && how != "mean")
    return respond(Error(400, "field to: must be value, last or mean"));
  double value = 0;
  int k = 1;
  if (how == "value") {
    if (!body.contains("value") || !body["value"].is_number())
      return respond(Error(400, "field value: a number is needed with to = value"));
    value = body["value"].get<double>();
  }
  if (how == "mean") {
    if (!body.contains("k") || !body["k"].is_number_integer() || body["k"].get<int>() < 1 ||
        body["k"].get<int>() > 100000)
      return respond(Error(400, "field k: a whole number of periods (1..100000) is needed with to = mean"));
    k = body["k"].get<int>();
  }
  if (!body.contains("who") || !body["who"].is_string() || body["who"].get<std::string>().empty())
    return respond(Error(400, "field who: say who re-levels the series (recorded in the audit log)"));
  const std::string who = body["who"].get<std::string>();
  const std::string note = body.contains("note") && body["note"].is_string() ? body["note"].get<std::string>() : "";
  const bool queued = engine_.Post([=, this] {
    double level = 0;
    bool not_found = false;
    std::string error;
    if (!engine_.Reset(key, how, value, k, who, note, level, not_found, error))
      return respond(Error(not_found ? 404 : (engine_.failure().empty() ? 409 : 503), error));
    auto v = engine_.FindSeries(key);
    json out = SeriesDetail(*v);
    out["reset"] = {{"level", level}, {"to", how}, {"who", who}};
    respond(Json(200, out));
  });
  if (!queued) respond(Error(503, "the engine is busy; retry later"));
}

}  // namespace forewarden
