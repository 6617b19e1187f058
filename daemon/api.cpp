#include "daemon/api.h"

#include <algorithm>
#include <cmath>
#include <ctime>
#include <nlohmann/json.hpp>

#include "daemon/ingest.h"
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
  r.body = body.dump() + "\n";
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

std::string IsoTime(std::int64_t ms) {
  const std::time_t t = static_cast<std::time_t>(ms / 1000);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y-%m-%dT%H:%M:%SZ", &tm);
  return buf;
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

std::string Status(const SeriesView& v) {
  if (v.state->active) return "alerting";
  if (v.stale) return "stale";
  if (!v.state->started || v.state->forecasts <= v.spec->spec.warmup) return "warming";
  return "ok";
}

std::optional<double> Signal(const SeriesView& v, bool trigg) {
  if (v.state->forecasts <= v.spec->spec.warmup) return std::nullopt;
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
  if (s.started) f = monitors::ForecastNext(spec.method, s.constants, s.model, s.next_index);
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
  out["alpha"] = s.constants.alpha;
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

Api::Api(Engine& engine, std::shared_ptr<const config::Settings> settings, std::string token)
    : engine_(engine), settings_(std::move(settings)), token_(std::move(token)) {}

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
        for (const auto& r : p.spec.rules)
          rules.push_back({{"name", r.name},
                           {"signal", monitors::SignalKindName(r.signal)},
                           {"limit", r.limit},
                           {"clear", r.clear},
                           {"persistence", r.persistence},
                           {"direction", monitors::DirectionName(r.direction)},
                           {"severity", monitors::SeverityName(r.severity)}});
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
  if (type == "text/csv") {
    batch = ParseCsvBatch(request.body, s->server.max_rows_per_batch);
  } else if (type == "application/x-ndjson") {
    batch = ParseNdjsonBatch(request.body, s->server.max_rows_per_batch);
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
    return respond(Json(400, problems_json(batch.problems, batch.problem_count)));
  }
  const bool queued = engine_.Submit(std::move(batch.rows), [this, respond, problems_json](IngestReply r) {
    switch (r.status) {
      case IngestReply::Status::kOk:
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
