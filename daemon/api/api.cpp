#include "daemon/api/api.h"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstring>
#include <ctime>
#include <iostream>
#include <map>
#include <nlohmann/json.hpp>
#include <unordered_map>

#include "daemon/api/attention.h"
#include "daemon/batch/parse.h"
#include "daemon/common/iso_time.h"
#include "daemon/common/log.h"
#include "daemon/common/parse_number.h"
#include "daemon/store/alert_reads.h"
#include "daemon/web/assets.h"
#include "monitors/ahead.h"
#include "monitors/interval.h"

namespace forewarden {

using nlohmann::json;

std::string UrlDecode(std::string_view text, bool query) {
  auto hex = [](char c) { return c <= '9' ? c - '0' : (c | 0x20) - 'a' + 10; };
  std::string out;
  out.reserve(text.size());
  for (std::size_t i = 0; i < text.size(); ++i) {
    const char c = text[i];
    if (c == '%' && i + 2 < text.size() && std::isxdigit(static_cast<unsigned char>(text[i + 1])) &&
        std::isxdigit(static_cast<unsigned char>(text[i + 2]))) {
      out += static_cast<char>(hex(text[i + 1]) * 16 + hex(text[i + 2]));
      i += 2;
    } else if (c == '+' && query) {
      out += ' ';
    } else {
      out += c;
    }
  }
  return out;
}

// ---- answers ---------------------------------------------------------------------------------

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

// The one place where a domain error becomes an HTTP status.
int HttpStatusOf(ErrorKind kind) {
  switch (kind) {
    case ErrorKind::kInvalid:
      return 400;
    case ErrorKind::kForbidden:
      return 403;
    case ErrorKind::kNotFound:
      return 404;
    case ErrorKind::kConflict:
      return 409;
    case ErrorKind::kBusy:
    case ErrorKind::kStoreFailed:
    case ErrorKind::kIo:
      return 503;
    case ErrorKind::kInternal:
      return 500;
  }
  return 500;
}

HttpResponse Error(const Status& status) {
  HttpResponse r = Error(HttpStatusOf(status.kind()), status.message());
  if (status.kind() == ErrorKind::kBusy) r.headers.emplace_back("Retry-After", "1");
  return r;
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

// ---- request bodies: every field checked for presence, type and range ----------------------

// A JSON object body. Each reader names the field in its error; a wrong type or a missing
// required field is invalid input (400), never an exception.
class Body {
 public:
  static Result<Body> Parse(const std::string& text, const char* example) {
    json j = json::parse(text, nullptr, false);
    if (j.is_discarded() || !j.is_object())
      return Status::Invalid(std::string("the body must be a JSON object such as ") + example);
    return Body(std::move(j));
  }
  bool Has(const char* field) const { return j_.contains(field) && !j_[field].is_null(); }
  // A string; "" when absent and not required.
  Result<std::string> Text(const char* field, bool required, const char* what) const {
    if (!Has(field)) {
      if (required) return Status::Invalid(std::string("field ") + field + ": missing; " + what);
      return std::string();
    }
    if (!j_[field].is_string())
      return Status::Invalid(std::string("field ") + field + ": must be a string; " + what);
    std::string v = j_[field].get<std::string>();
    if (required && v.empty())
      return Status::Invalid(std::string("field ") + field + ": empty; " + what);
    if (v.size() > 4096)
      return Status::Invalid(std::string("field ") + field + ": longer than 4096 bytes");
    return v;
  }
  // A finite number.
  Result<double> Number(const char* field, const char* what) const {
    if (!Has(field)) return Status::Invalid(std::string("field ") + field + ": missing; " + what);
    const json& v = j_[field];
    if (!v.is_number())
      return Status::Invalid(std::string("field ") + field + ": must be a number; " + what);
    const double d = v.get<double>();
    if (!std::isfinite(d))
      return Status::Invalid(std::string("field ") + field + ": not a finite number");
    return d;
  }
  // A whole number in [lo, hi] (1.5, "3" and values beyond the range are refused, not cut).
  Result<std::int64_t> Whole(const char* field, std::int64_t lo, std::int64_t hi,
                             const char* what) const {
    auto range = [&] { return std::to_string(lo) + ".." + std::to_string(hi); };
    if (!Has(field)) return Status::Invalid(std::string("field ") + field + ": missing; " + what);
    const json& v = j_[field];
    bool in = false;
    std::int64_t out = 0;
    if (v.is_number_unsigned()) {
      const auto u = v.get<std::uint64_t>();
      in = u <= static_cast<std::uint64_t>(hi) && static_cast<std::int64_t>(u) >= lo;
      out = static_cast<std::int64_t>(u);
    } else if (v.is_number_integer()) {
      out = v.get<std::int64_t>();
      in = out >= lo && out <= hi;
    } else {
      return Status::Invalid(std::string("field ") + field + ": must be a whole number (" +
                             range() + "); " + what);
    }
    if (!in)
      return Status::Invalid(std::string("field ") + field + ": outside " + range() + "; " + what);
    return out;
  }

 private:
  explicit Body(json j) : j_(std::move(j)) {}
  json j_;
};

const char* SeriesStatusText(const SeriesView& v) {
  return StatusName(StatusOf(*v.state, *v.spec, v.stale));
}

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
           {"status", SeriesStatusText(v)},
           {"last_period",
            s.seen ? json(monitors::FormatPeriod(v.spec->period, s.last_period)) : json(nullptr)}};
  std::optional<double> f;
  if (s.started)
    f = monitors::ForecastNext(spec.method, monitors::EffectiveConstants(spec, s), s.model,
                               s.next_index);
  out["forecast"] = Number(f);
  out["trigg_signal"] = Number(Signal(v, true));
  out["cusum_signal"] = Number(Signal(v, false));
  out["alerts"] = Alerts(*v.spec, s.active);
  return out;
}

// The constants a method uses (alpha always; beta, phi, gamma and the season where it has them).
json ConstantsJson(monitors::Method method, const monitors::Constants& k) {
  json constants{{"alpha", k.alpha}};
  if (monitors::HasTrend(method)) constants["beta"] = k.beta;
  if (k.phi != 1.0) constants["phi"] = k.phi;
  if (k.season_length > 1) {
    constants["gamma"] = k.gamma;
    constants["season_length"] = k.season_length;
  }
  return constants;
}

json AdaptiveJson(const monitors::PolicySpec& spec) {
  return spec.adaptive.enabled ? json{{"floor", spec.adaptive.floor}, {"cap", spec.adaptive.cap}}
                               : json(nullptr);
}

// The next `horizon` forecasts with their intervals at the policy's coverage (monitors/ahead.h).
json ForecastJson(const SeriesView& v, int horizon) {
  const monitors::SeriesState& s = *v.state;
  const config::Policy& p = *v.spec;
  const monitors::PolicySpec& spec = p.spec;
  json out{{"key", v.key},
           {"policy", v.policy},
           {"method", monitors::MethodName(spec.method)},
           {"coverage", spec.coverage}};
  const char* why = nullptr;
  if (spec.method == monitors::Method::kSeasonalMul)
    why = "seasonal-mul has no analytic forecast variance (a multiplicative model)";
  else if (monitors::IsIntermittent(spec.method))
    why = "croston and sba forecast a demand rate, which carries no interval";
  else if (!(s.stats.mad > 0))
    why = "no error spread yet (MAD is 0)";
  out["interval"] = why ? json(nullptr) : json("analytic");
  out["no_interval_because"] = why ? json(why) : json(nullptr);
  json rows = json::array();
  if (s.started) {
    const monitors::Constants k = monitors::EffectiveConstants(spec, s);
    const std::vector<double> f =
        monitors::ForecastAhead(spec.method, k, s.model, s.next_index, horizon);
    const double one = monitors::IntervalHalfWidth(spec.coverage, s.stats.mad);
    std::vector<double> variance(f.size());
    const bool analytic = !why && monitors::RelativeVariances(
                                      spec.method, k, static_cast<int>(f.size()), variance.data());
    for (std::size_t i = 0; i < f.size(); ++i) {
      const int h = static_cast<int>(i) + 1;
      json row{{"h", h},
               {"period", monitors::FormatPeriod(p.period, s.last_period + h)},
               {"forecast", f[i]}};
      if (analytic) {
        row["lower"] = f[i] - one * std::sqrt(variance[i]);
        row["upper"] = f[i] + one * std::sqrt(variance[i]);
      } else {
        row["lower"] = nullptr;
        row["upper"] = nullptr;
      }
      rows.push_back(std::move(row));
    }
  }
  out["rows"] = std::move(rows);
  return out;
}

json SeriesDetail(const SeriesView& v) {
  json out = SeriesSummary(v);
  const monitors::SeriesState& s = *v.state;
  const monitors::PolicySpec& spec = v.spec->spec;
  out["labels"] = json::parse(v.labels, nullptr, false);
  out["stale"] = v.stale;
  out["next_period"] =
      s.seen ? json(monitors::FormatPeriod(v.spec->period, s.last_period + 1)) : json(nullptr);
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
  out["constants"] = ConstantsJson(spec.method, monitors::EffectiveConstants(spec, s));
  out["adaptive"] = AdaptiveJson(spec);
  out["smoothed_error"] = s.stats.smoothed_error;
  out["mad"] = s.stats.mad;
  out["cusum"] = s.stats.cusum;
  out["periods"] = s.next_index;
  out["forecasts"] = s.forecasts;
  // periods judged past the warm-up: the age the next actual's rules read their limits at
  out["age"] = monitors::SeriesAge(spec, s);
  out["missing_periods"] = s.missing;
  return out;
}

// The diagnosis of an alert (as AlertObject gives it) from its series' retained history now, as
// replay --alerts makes it (it is remade while the alert is open); else the one stored when it
// opened (null for a storm member or when there was too little to go on).
json DiagnosisJson(Engine& engine, const json& alert) {
  json stored = alert.value("diagnosis", json(nullptr));
  const std::string key = alert.value("series", "");
  const auto v = engine.FindSeries(key);
  if (!v) return stored;
  const config::Policy& p = *v->spec;
  const monitors::PeriodParse opened =
      monitors::ParsePeriod(p.period, alert.value("opened_period", ""));
  if (!opened.ok()) return stored;
  const Result<monitors::AlertDiagnosis> d = engine.DiagnoseAlert(key, opened.ordinal);
  if (!d || !d->diagnosis.ok) return stored;
  return DiagnosisObject(*d, p.period);
}

}  // namespace

// ---- the route table -------------------------------------------------------------------------

struct Api::Call {
  HttpRequest request;
  std::string path;
  std::vector<std::pair<std::string, std::string>> query;
  std::string key;      // {key}: the series key, percent-decoded
  std::string id_text;  // {id}: as in the path
  const Route* route = nullptr;
  std::optional<Person> person;  // who the bearer token names, when it names someone
  Respond respond;
  std::atomic<bool> answered{false};

  // Answers once; a second answer (a defect) is dropped. An answer that throws on its way out
  // does not count, so the guard can still answer 500.
  void Answer(HttpResponse r) {
    if (answered.load()) return;
    respond(std::move(r));
    answered.store(true);
  }
  void Fail(const Status& s) { Answer(Error(s)); }
  std::optional<std::string> Param(const char* name) const {
    for (auto& [k, v] : query)
      if (k == name) return v;
    return std::nullopt;
  }
  std::string ParamOr(const char* name, const char* fallback = "") const {
    return Param(name).value_or(fallback);
  }
};

// What a route asks of the caller (access.h).
enum class Need {
  kNothing,   // health, metrics, the page's files: never a token
  kRead,      // a token of any role when server.token_for_reads is set
  kPlanner,   // works alerts and resets forecasts
  kOperator,  // everything else that writes
};

struct Api::Route {
  const char* method;
  const char* pattern;  // literal segments, {key} (one or more segments), {id} (one segment),
                        // {file} (one segment)
  Need need;
  void (Api::*handler)(const std::shared_ptr<Call>&);
};

const std::vector<Api::Route>& Api::Routes() {
  static const std::vector<Route> kRoutes = {
      {"GET", "/healthz", Need::kNothing, &Api::Health},
      {"GET", "/readyz", Need::kNothing, &Api::Ready},
      {"GET", "/metrics", Need::kNothing, &Api::MetricsText},
      {"GET", "/", Need::kNothing, &Api::Page},
      {"GET", "/page/{id}", Need::kNothing, &Api::Page},
      {"GET", "/v1/access", Need::kNothing, &Api::AccessInfo},
      {"GET", "/v1/instances", Need::kRead, &Api::Instances},
      {"POST", "/v1/actuals", Need::kOperator, &Api::Ingest},
      {"GET", "/v1/policies", Need::kRead, &Api::Policies},
      {"GET", "/v1/attention", Need::kRead, &Api::Attention},
      {"GET", "/v1/series", Need::kRead, &Api::SeriesList},
      {"GET", "/v1/series/{key}/history", Need::kRead, &Api::SeriesHistory},
      {"GET", "/v1/series/{key}/forecast", Need::kRead, &Api::SeriesForecast},
      {"GET", "/v1/forecasts", Need::kRead, &Api::Forecasts},
      {"POST", "/v1/series/{key}/reset", Need::kPlanner, &Api::SeriesReset},
      {"GET", "/v1/series/{key}", Need::kRead, &Api::SeriesDetailOf},
      {"GET", "/v1/alerts", Need::kRead, &Api::AlertList},
      {"POST", "/v1/alerts/{id}/acknowledge", Need::kPlanner, &Api::AlertAct},
      {"POST", "/v1/alerts/{id}/snooze", Need::kPlanner, &Api::AlertAct},
      {"POST", "/v1/alerts/{id}/resolve", Need::kPlanner, &Api::AlertAct},
      {"GET", "/v1/alerts/{id}", Need::kRead, &Api::AlertDetail},
      {"GET", "/v1/deliveries", Need::kRead, &Api::DeliveryList},
      {"POST", "/v1/deliveries/retry", Need::kOperator, &Api::DeliveryRetry},
  };
  return kRoutes;
}

namespace {

std::vector<std::string_view> Segments(std::string_view path) {
  std::vector<std::string_view> out;
  if (path.empty() || path[0] != '/') return out;
  path.remove_prefix(1);
  while (true) {
    const std::size_t slash = path.find('/');
    out.push_back(path.substr(0, slash));
    if (slash == std::string_view::npos) break;
    path.remove_prefix(slash + 1);
  }
  return out;
}

// Whether `path` fits `pattern`; fills the key or id it names.
bool Match(std::string_view pattern, std::string_view path, std::string& key, std::string& id) {
  const auto want = Segments(pattern), have = Segments(path);
  if (have.empty()) return false;
  std::size_t w = 0, h = 0;
  for (; w < want.size(); ++w) {
    if (want[w] == "{key}") {
      const std::size_t tail = want.size() - w - 1;  // literal segments after the key
      if (have.size() < h + 1 + tail) return false;
      const std::size_t end = have.size() - tail;
      std::string joined;
      for (std::size_t i = h; i < end; ++i) {
        if (i > h) joined += '/';
        joined.append(have[i]);
      }
      if (joined.empty()) return false;
      key = UrlDecode(joined, false);
      h = end;
    } else if (want[w] == "{id}") {
      if (h >= have.size() || have[h].empty()) return false;
      id.assign(have[h++]);
    } else {
      if (h >= have.size() || have[h] != want[w]) return false;
      ++h;
    }
  }
  return h == have.size();
}

}  // namespace

Api::Api(Engine& engine, std::shared_ptr<const config::Settings> settings, Access access,
         Metrics* metrics)
    : engine_(engine),
      metrics_(metrics),
      settings_(std::move(settings)),
      access_(std::make_shared<const Access>(std::move(access))),
      exports_(static_cast<std::size_t>(settings_->server.max_exports)),
      reader_(static_cast<std::size_t>(settings_->server.read_queue_depth)) {}

void Api::Update(std::shared_ptr<const config::Settings> settings, Access access) {
  std::lock_guard lock(mu_);
  settings_ = std::move(settings);
  access_ = std::make_shared<const Access>(std::move(access));
}

std::shared_ptr<const config::Settings> Api::settings() const {
  std::lock_guard lock(mu_);
  return settings_;
}

std::shared_ptr<const Access> Api::access() const {
  std::lock_guard lock(mu_);
  return access_;
}

bool Api::Authorized(Call& call) {
  const Need need = call.route->need;
  if (need == Need::kNothing) return true;
  const std::shared_ptr<const Access> access = this->access();
  if (access->open()) return true;
  // Reads that need no token need no one's name either: no hashing of a token they carry.
  if (need == Need::kRead && !access->reads_need_token()) return true;
  call.person = access->Identify(call.request.authorization);
  if (!call.person) {
    counters_.rejected_unauthorized.fetch_add(1);
    call.Answer(Unauthorized());
    return false;
  }
  const Role want = need == Need::kRead      ? Role::kRead
                    : need == Need::kPlanner ? Role::kPlanner
                                             : Role::kOperator;
  if (call.person->role < want) {
    counters_.rejected_forbidden.fetch_add(1);
    call.Answer(Error(403, std::string("the token of ") + call.person->name + " has the role " +
                               RoleName(call.person->role) + "; this needs " + RoleName(want)));
    return false;
  }
  return true;
}

std::string Api::Actor(const Call& call, const std::string& from_body) {
  if (call.person && !call.person->name.empty()) return call.person->name;
  return from_body;
}

void Api::Internal(Call& call, const char* what) {
  counters_.internal_errors.fetch_add(1);
  // The request line only: bodies and headers may hold secrets.
  WriteLog(std::cerr, LogLine("error", "request failed",
                              {{"method", call.request.method.substr(0, 16)},
                               {"target", call.request.target.substr(0, 512)},
                               {"what", std::string(what).substr(0, 200)}}));
  call.Answer(Error(500, "the request failed inside the service; it was logged"));
}

void Api::Handle(HttpRequest&& request, Respond respond) {
  auto call = std::make_shared<Call>();
  call->request = std::move(request);
  SplitTarget(call->request.target, call->path, call->query);
  if (metrics_) {
    call->respond = [this, call_ptr = call.get(), respond = std::move(respond)](HttpResponse r) {
      metrics_->CountRequest(call_ptr->route ? call_ptr->route->pattern : "other", r.status);
      respond(std::move(r));
    };
  } else {
    call->respond = std::move(respond);
  }
  try {
    Dispatch(call);
  } catch (const std::exception& e) {
    Internal(*call, e.what());
  } catch (...) {
    Internal(*call, "unknown exception");
  }
}

void Api::Dispatch(const std::shared_ptr<Call>& call) {
  const char* other_method = nullptr;
  for (const Route& r : Routes()) {
    std::string key, id;
    if (!Match(r.pattern, call->path, key, id)) continue;
    if (call->request.method != r.method) {
      if (!other_method) other_method = r.method;
      continue;
    }
    call->route = &r;
    call->key = std::move(key);
    call->id_text = std::move(id);
    if (!Authorized(*call)) return;
    if (sharing_ && Redirected(*call)) return;
    return (this->*r.handler)(call);
  }
  if (other_method) return call->Answer(Error(405, std::string("use ") + other_method));
  call->Answer(Error(404, "no such endpoint: " + call->path));
}

// `job` behind the same guard as Handle: what it throws is answered 500.
std::function<void()> Api::Guarded(const std::shared_ptr<Call>& call, std::function<void()> job) {
  return [this, call, job = std::move(job)] {
    try {
      job();
    } catch (const std::exception& e) {
      Internal(*call, e.what());
    } catch (...) {
      Internal(*call, "unknown exception");
    }
  };
}

void Api::OnEngine(const std::shared_ptr<Call>& call, std::function<void()> job) {
  if (!engine_.Post(Guarded(call, std::move(job)))) call->Fail(EngineBusy());
}

void Api::OffEngine(const std::shared_ptr<Call>& call, std::function<void()> job) {
  if (!reader_.Post(Guarded(call, std::move(job)))) {
    counters_.rejected_read_queue_full.fetch_add(1);
    call->Fail(
        Status::Busy("too many list requests are waiting (server.read_queue_depth); retry "
                     "later"));
  }
}

// ---- handlers --------------------------------------------------------------------------------

void Api::Health(const std::shared_ptr<Call>& c) {
  c->Answer(Json(200, {{"alive", true}}));
}

bool Api::Redirected(Call& call) {
  const std::string pattern = call.route->pattern;
  std::int32_t part = -1;
  std::string what;
  if (pattern.rfind("/v1/series/{key}", 0) == 0) {
    part = sharing_->partition_of(call.key);
    what = "series '" + call.key + "'";
  } else if (pattern.rfind("/v1/alerts/{id}", 0) == 0) {
    // alert ids carry their partition (engine.h): (partition + 1) * 2^43 + ...
    const std::int64_t id = std::strtoll(call.id_text.c_str(), nullptr, 10);
    if (id >= (std::int64_t{1} << 43)) part = static_cast<std::int32_t>((id >> 43) - 1);
    what = "alert " + call.id_text;
  }
  if (part < 0) return false;
  const std::vector<std::int32_t> held = sharing_->held();
  if (std::binary_search(held.begin(), held.end(), part)) return false;
  const std::vector<std::string> owners = sharing_->owners();
  // an id beyond the topic's partitions names no alert: the handler answers it (404)
  if (part >= static_cast<std::int32_t>(owners.size())) return false;
  const std::string owner =
      part < static_cast<std::int32_t>(owners.size()) ? owners[static_cast<std::size_t>(part)] : "";
  if (owner.empty() || owner == sharing_->self()) {
    HttpResponse r = Json(503, {{"error", what + " belongs to partition " + std::to_string(part) +
                                              ", which is moving between instances; retry "
                                              "shortly"},
                                {"partition", part}});
    r.headers.emplace_back("Retry-After", "2");
    call.Answer(std::move(r));
    return true;
  }
  const std::string location = owner + call.request.target;
  HttpResponse r = Json(307, {{"error", what + " is held by another instance"},
                              {"partition", part},
                              {"owner", owner},
                              {"location", location}});
  r.headers.emplace_back("Location", location);
  call.Answer(std::move(r));
  return true;
}

void Api::Instances(const std::shared_ptr<Call>& c) {
  if (!sharing_)
    return c->Answer(Json(200, {{"sharing", false}, {"self", PublicUrl(*settings())}}));
  const std::vector<std::string> owners = sharing_->owners();
  const std::vector<std::int32_t> held = sharing_->held();
  json partitions = json::array();
  std::map<std::string, std::vector<std::int32_t>> by_owner;
  for (std::size_t p = 0; p < owners.size(); ++p) {
    const bool here = std::binary_search(held.begin(), held.end(), static_cast<std::int32_t>(p));
    const std::string owner = here ? sharing_->self() : owners[p];
    partitions.push_back({{"partition", p}, {"owner", owner}, {"here", here}});
    by_owner[owner].push_back(static_cast<std::int32_t>(p));
  }
  json instances = json::array();
  for (const auto& [owner, parts] : by_owner)
    instances.push_back(
        {{"url", owner}, {"partitions", parts}, {"self", owner == sharing_->self()}});
  const std::string not_ready = sharing_->not_ready();
  json out = {{"sharing", true},
              {"self", sharing_->self()},
              {"ready", not_ready.empty()},
              {"reason", not_ready},
              {"held", held},
              {"partitions", partitions},
              {"instances", instances}};
  if (const auto key = c->Param("series")) {  // where one series lives
    const std::int32_t part = sharing_->partition_of(*key);
    const bool here = std::binary_search(held.begin(), held.end(), part);
    json where = {{"key", *key}, {"partition", part}, {"here", here}};
    where["owner"] = here ? sharing_->self()
                     : part >= 0 && part < static_cast<std::int32_t>(owners.size())
                         ? owners[static_cast<std::size_t>(part)]
                         : std::string();
    out["series"] = std::move(where);
  }
  c->Answer(Json(200, out));
}

void Api::Ready(const std::shared_ptr<Call>& c) {
  const std::string failure = engine_.failure();
  if (!failure.empty()) return c->Answer(Json(503, {{"ready", false}, {"reason", failure}}));
  if (sharing_)
    if (const std::string why = sharing_->not_ready(); !why.empty())
      return c->Answer(Json(503, {{"ready", false}, {"reason", why}}));
  c->Answer(Json(200, {{"ready", true}}));
}

void Api::MetricsText(const std::shared_ptr<Call>& c) {
  if (!metrics_) return c->Fail(Status::NotFound("metrics are not enabled"));
  // The engine's own figures and the read view on the engine; the pass over every series and
  // the text on the reader thread.
  OnEngine(c, [this, c] {
    auto snapshot = std::make_shared<EngineSnapshot>(engine_.Snapshot());
    std::shared_ptr<const ReadView> view = engine_.ReadSnapshot();
    OffEngine(c, [this, c, snapshot, view] {
      AddSeriesHealth(*view, *snapshot);
      HttpResponse r;
      r.content_type = "text/plain; version=0.0.4; charset=utf-8";
      r.body = metrics_->Render(*snapshot);
      c->Answer(std::move(r));
    });
  });
}

void Api::Policies(const std::shared_ptr<Call>& c) {
  // The read view and each policy's last arrival on the engine; the count of series per
  // policy (a pass over every series) and the answer on the reader thread.
  OnEngine(c, [this, c] {
    std::shared_ptr<const ReadView> view = engine_.ReadSnapshot();
    std::vector<std::int64_t> arrivals;
    for (const config::Policy& p : view->settings->policies)
      arrivals.push_back(engine_.LastArrival(p.name));
    OffEngine(c, [c, view, arrivals] { AnswerPolicies(*c, *view, arrivals); });
  });
}

void Api::AnswerPolicies(Call& call, const ReadView& view,
                         const std::vector<std::int64_t>& arrivals) {
  const auto& policies = view.settings->policies;
  json list = json::array();
  std::vector<long> per_policy(policies.size(), 0);
  for (const ReadRow& r : view.rows) ++per_policy[r.policy];
  std::unordered_map<std::string, long> counts;
  for (std::size_t i = 0; i < policies.size(); ++i) counts[policies[i].name] = per_policy[i];
  for (const config::Policy& p : policies) {
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
      if (!r.young.empty()) {
        // limits by age (rule.h): [from, until) past the warm-up; the last runs on without end
        json by_age = json::array();
        int from = 0;
        for (const monitors::AgeLimit& a : r.young) {
          by_age.push_back(
              {{"from", from}, {"until", a.until}, {"limit", a.limit}, {"clear", a.clear}});
          from = a.until;
        }
        by_age.push_back(
            {{"from", from}, {"until", nullptr}, {"limit", r.limit}, {"clear", r.clear}});
        rule["limits_by_age"] = std::move(by_age);
      }
      for (const auto& cal : p.calibrations)
        if (cal.rule == r.name)
          rule["calibration"] = {{"false_alert_every", cal.every},
                                 {"derived_limit", cal.limit},
                                 {"simulated_rate", cal.rate},
                                 {"expected_false_alerts_per_week",
                                  cal.per_series_week * static_cast<double>(counts[p.name])}};
      rules.push_back(std::move(rule));
    }
    const std::int64_t last = arrivals[static_cast<std::size_t>(&p - policies.data())];
    list.push_back({{"name", p.name},
                    {"match", {{"key", p.match.key}, {"labels", labels}}},
                    {"period", monitors::PeriodKindName(p.period)},
                    {"method", monitors::MethodName(p.spec.method)},
                    {"constants", ConstantsJson(p.spec.method, p.spec.constants)},
                    {"adaptive", AdaptiveJson(p.spec)},
                    {"history", p.history},
                    {"stale_after", p.stale_after},
                    {"series", counts[p.name]},
                    {"last_actual_at", last ? json(IsoTime(last)) : json(nullptr)},
                    {"rules", rules}});
  }
  call.Answer(Json(200, {{"policies", list}}));
}

void Api::SeriesList(const std::shared_ptr<Call>& c) {
  Result<std::int64_t> limit = ParseWholeNumber(c->ParamOr("limit", "100"), 1, 10000);
  if (!limit) return c->Fail(Status(limit.status()).Prefix("limit: "));
  Result<std::int64_t> offset = ParseWholeNumber(c->ParamOr("offset", "0"), 0, INT64_MAX / 2);
  if (!offset) return c->Fail(Status(offset.status()).Prefix("offset: "));
  const std::string policy = c->ParamOr("policy");
  const std::string status = c->ParamOr("status");
  const std::string sort = c->ParamOr("sort", "key");
  const std::string label = c->ParamOr("label");
  if (!status.empty() && status != "ok" && status != "alerting" && status != "stale" &&
      status != "warming")
    return c->Fail(Status::Invalid("status must be ok, alerting, stale or warming"));
  if (sort != "key" && sort != "trigg" && sort != "cusum")
    return c->Fail(
        Status::Invalid("sort must be key, trigg or cusum (largest absolute signal first)"));
  Result<LabelFilter> label_filter = LabelFilter::Parse(label);
  if (!label_filter) return c->Fail(label_filter.status());
  const long lim = static_cast<long>(*limit), off = static_cast<long>(*offset);
  if (status == "alerting") {
    // The alerting index costs the alerting series: filter and sort them on the engine.
    OnEngine(c, [=, this, labels = std::move(*label_filter)]() mutable {
      std::vector<std::pair<double, SeriesView>> rows;
      engine_.ForEachAlertingSeries([&](const SeriesView& v) {
        if (!policy.empty() && v.policy != policy) return;
        if (!labels.Matches(v.labels)) return;
        const std::optional<double> sig = sort == "key" ? std::nullopt : Signal(v, sort == "trigg");
        rows.emplace_back(sig ? std::fabs(*sig) : -1, v);
      });
      auto before = [&](const auto& a, const auto& b) {
        if (sort != "key" && a.first != b.first) return a.first > b.first;
        return a.second.key < b.second.key;
      };
      const std::size_t end =
          std::min(rows.size(), static_cast<std::size_t>(off) + static_cast<std::size_t>(lim));
      std::partial_sort(rows.begin(), rows.begin() + static_cast<long>(end), rows.end(), before);
      json page = json::array();
      for (std::size_t i = std::min(end, static_cast<std::size_t>(off)); i < end; ++i)
        page.push_back(SeriesSummary(rows[i].second));
      c->Answer(
          Json(200, {{"total", rows.size()}, {"offset", off}, {"limit", lim}, {"series", page}}));
    });
    return;
  }
  // Everything else: the read view on the engine; filter and sort every series of it on the
  // reader thread; the page's rows as they are now on the engine again.
  OnEngine(c, [=, this, labels = std::move(*label_filter)]() mutable {
    std::shared_ptr<const ReadView> view = engine_.ReadSnapshot();
    OffEngine(c, [=, this, labels = std::move(labels)]() mutable {
      struct Entry {
        std::uint32_t index;
        float order;  // |signal| (-1 when undefined) for sort=trigg|cusum
      };
      std::vector<Entry> rows;
      const ReadView& v = *view;
      for (std::size_t i = 0; i < v.size(); ++i) {
        const ReadRow& r = v.rows[i];
        if (!policy.empty() && v.policy(i).name != policy) continue;
        if (!status.empty()) {
          if (StatusName(StatusOf(v, i)) != status) continue;
        }
        if (!labels.Matches(v.labels(i))) continue;
        float order = -1;
        if (sort != "key") {
          const float sig = sort == "trigg" ? r.trigg : r.cusum;
          if (!std::isnan(sig)) order = std::fabs(sig);
        }
        rows.push_back({static_cast<std::uint32_t>(i), order});
      }
      auto before = [&](const Entry& a, const Entry& b) {
        if (sort != "key" && a.order != b.order) return a.order > b.order;
        return v.key(a.index) < v.key(b.index);
      };
      const std::size_t end =
          std::min(rows.size(), static_cast<std::size_t>(off) + static_cast<std::size_t>(lim));
      const std::size_t from = std::min(rows.size(), static_cast<std::size_t>(off));
      std::partial_sort(rows.begin(), rows.begin() + static_cast<long>(end), rows.end(), before);
      std::vector<std::uint32_t> page;
      for (std::size_t i = from; i < end; ++i) page.push_back(rows[i].index);
      const std::size_t total = rows.size();
      OnEngine(c, [=, this] {
        json out = json::array();
        for (std::uint32_t i : page) {
          const std::optional<SeriesView> s = engine_.SeriesAt(i);
          if (s && s->key == view->key(i)) out.push_back(SeriesSummary(*s));
        }
        c->Answer(Json(200, {{"total", total}, {"offset", off}, {"limit", lim}, {"series", out}}));
      });
    });
  });
}

void Api::SeriesDetailOf(const std::shared_ptr<Call>& c) {
  OnEngine(c, [this, c] {
    auto v = engine_.FindSeries(c->key);
    if (!v) return c->Fail(Status::NotFound("no series '" + c->key + "'"));
    json out = SeriesDetail(*v);
    Result<json> audit = AuditOf(engine_.db(), c->key, 100);
    if (!audit) return c->Fail(audit.status());
    out["audit"] = std::move(*audit);
    c->Answer(Json(200, out));
  });
}

void Api::SeriesHistory(const std::shared_ptr<Call>& c) {
  OnEngine(c, [this, c] {
    const std::string& key = c->key;
    auto v = engine_.FindSeries(key);
    if (!v) return c->Fail(Status::NotFound("no series '" + key + "'"));
    std::int64_t lo = INT64_MIN, hi = INT64_MAX;
    for (auto [name, bound] : {std::pair{"from", &lo}, std::pair{"to", &hi}}) {
      const std::string text = c->ParamOr(name);
      if (text.empty()) continue;
      const monitors::PeriodParse p = monitors::ParsePeriod(v->spec->period, text);
      if (!p.ok()) return c->Fail(Status::Invalid(std::string(name) + ": " + p.error));
      *bound = p.ordinal;
    }
    const config::Policy& policy = *v->spec;
    std::vector<HistoryRow> rows;
    std::string error;
    if (!engine_.History(key, lo, hi, rows, error)) return c->Fail(Status::StoreFailed(error));
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
    c->Answer(Json(200, {{"key", key}, {"policy", policy.name}, {"rows", out}}));
  });
}

void Api::SeriesForecast(const std::shared_ptr<Call>& c) {
  Result<std::int64_t> horizon = ParseWholeNumber(c->ParamOr("horizon", "13"), 1, kMaxHorizon);
  if (!horizon) return c->Fail(Status(horizon.status()).Prefix("horizon: "));
  OnEngine(c, [this, c, h = static_cast<int>(*horizon)] {
    auto v = engine_.FindSeries(c->key);
    if (!v) return c->Fail(Status::NotFound("no series '" + c->key + "'"));
    c->Answer(Json(200, ForecastJson(*v, h)));
  });
}

void Api::Forecasts(const std::shared_ptr<Call>& c) {
  ExportQuery q;
  Result<std::int64_t> horizon =
      ParseWholeNumber(c->ParamOr("horizon", "13"), 1, kMaxExportHorizon);
  if (!horizon) return c->Fail(Status(horizon.status()).Prefix("horizon: "));
  q.horizon = static_cast<int>(*horizon);
  const std::string format = c->ParamOr("format", "csv");
  if (format != "csv" && format != "ndjson")
    return c->Fail(Status::Invalid("format: must be csv or ndjson"));
  q.ndjson = format == "ndjson";
  q.policy = c->ParamOr("policy");
  q.label = c->ParamOr("label");
  Result<LabelFilter> labels = LabelFilter::Parse(q.label);
  if (!labels) return c->Fail(Status(labels.status()).Prefix("label: "));
  if (!q.policy.empty()) {
    const auto& policies = settings()->policies;
    if (std::none_of(policies.begin(), policies.end(),
                     [&](const config::Policy& p) { return p.name == q.policy; }))
      return c->Fail(Status::Invalid("policy: no policy '" + q.policy + "'"));
  }
  std::shared_ptr<ExportPool::Slot> slot = exports_.Reserve();
  if (!slot) {
    counters_.rejected_exports_busy.fetch_add(1);
    return c->Fail(Status::Busy(
        "as many exports as server.max_exports allows are running; retry when one ends"));
  }
  OnEngine(c, [this, c, q, slot, labels = std::move(*labels)]() mutable {
    auto seeds = std::make_shared<const ForecastSeeds>(TakeForecastSeeds(engine_, q, labels));
    auto body = std::make_shared<BodyStream>();
    HttpResponse r;
    r.content_type = q.ndjson ? "application/x-ndjson" : "text/csv; charset=utf-8";
    r.headers = {{"Forewarden-As-Of", IsoTime(seeds->as_of_ms)},
                 {"Forewarden-Series", std::to_string(seeds->rows.size())},
                 {"Forewarden-Rows", std::to_string(seeds->rows_total())},
                 {"Cache-Control", "no-store"}};
    r.stream = body;
    exports_.Run(slot, body, [this, seeds, body] {
      const long sent = WriteForecasts(*seeds, *body);
      counters_.export_rows.fetch_add(sent);
      (sent == seeds->rows_total() ? counters_.exports_complete : counters_.exports_cut)
          .fetch_add(1);
    });
    c->Answer(std::move(r));
  });
}

void Api::SeriesReset(const std::shared_ptr<Call>& c) {
  Result<Body> body = Body::Parse(c->request.body, "{\"to\": \"last\", \"who\": \"name\"}");
  if (!body) return c->Fail(body.status());
  Result<std::string> how = body->Text("to", true, "value, last, mean or change");
  if (!how) return c->Fail(how.status());
  if (*how != "value" && *how != "last" && *how != "mean" && *how != "change")
    return c->Fail(Status::Invalid("field to: must be value, last, mean or change"));
  double value = 0;
  int k = 1;
  std::int64_t alert_id = 0;
  if (*how == "change") {  // the level since the change that set off this alert (its diagnosis)
    Result<std::int64_t> a = body->Whole("alert", 1, INT64_MAX,
                                         "the alert whose change to re-level to, with to = change");
    if (!a) return c->Fail(a.status());
    alert_id = *a;
  }
  if (*how == "value") {
    Result<double> v = body->Number("value", "the new level with to = value");
    if (!v) return c->Fail(v.status());
    value = *v;
  }
  if (*how == "mean") {
    Result<std::int64_t> n = body->Whole("k", 1, 100000, "the periods to average with to = mean");
    if (!n) return c->Fail(n.status());
    k = static_cast<int>(*n);
  }
  // With a person's token the audit log records the person; the body cannot say otherwise.
  const bool named = !Actor(*c, "").empty();
  Result<std::string> who =
      body->Text("who", !named, "say who re-levels the series (recorded in the audit log)");
  if (!who) return c->Fail(who.status());
  *who = Actor(*c, *who);
  Result<std::string> note = body->Text("note", false, "a note for the audit log");
  if (!note) return c->Fail(note.status());
  OnEngine(c, [this, c, how = *how, value, k, who = *who, note = *note, alert_id] {
    double to_value = value;
    std::string to_how = how, to_note = note;
    if (how == "change") {
      Result<json> alert = AlertObject(engine_.db(), alert_id);
      if (!alert) return c->Fail(alert.status());
      if (alert->value("series", "") != c->key)
        return c->Fail(Status::Invalid("field alert: alert " + std::to_string(alert_id) +
                                       " is not an alert of this series"));
      const json d = DiagnosisJson(engine_, *alert);
      if (d.is_null())
        return c->Fail(Status::Conflict("alert " + std::to_string(alert_id) +
                                        " has no diagnosis (too little retained history)"));
      to_value = d["level"].get<double>();
      to_how = "value";
      to_note = "the level since the change that began in " + d["change_began"].get<std::string>() +
                " (alert #" + std::to_string(alert_id) + ")" + (note.empty() ? "" : "; " + note);
    }
    Result<double> level = engine_.Reset(c->key, to_how, to_value, k, who, to_note);
    if (!level) return c->Fail(level.status());
    auto v = engine_.FindSeries(c->key);
    json out = SeriesDetail(*v);
    out["reset"] = {{"level", *level}, {"to", how}, {"who", who}};
    c->Answer(Json(200, out));
  });
}

void Api::AlertList(const std::shared_ptr<Call>& c) {
  AlertFilter f;
  Result<std::int64_t> limit = ParseWholeNumber(c->ParamOr("limit", "100"), 1, 1000);
  if (!limit) return c->Fail(Status(limit.status()).Prefix("limit: "));
  f.limit = static_cast<long>(*limit);
  if (auto b = c->Param("before")) {
    Result<std::int64_t> before = ParseWholeNumber(*b, 1, INT64_MAX);
    if (!before) return c->Fail(Status(before.status()).Prefix("before: "));
    f.before = *before;
  }
  f.state = c->ParamOr("state");
  if (!f.state.empty() && f.state != "open" && f.state != "acknowledged" && f.state != "snoozed" &&
      f.state != "resolved" && f.state != "unresolved")
    return c->Fail(
        Status::Invalid("state must be open, acknowledged, snoozed, resolved or unresolved"));
  f.severity = c->ParamOr("severity");
  if (!f.severity.empty() && !monitors::ParseSeverity(f.severity))
    return c->Fail(Status::Invalid("severity must be info, warning or critical"));
  if (auto g = c->Param("group"); g && !g->empty()) {
    Result<std::int64_t> group = ParseWholeNumber(*g, 1, INT64_MAX);
    if (!group) return c->Fail(Status(group.status()).Prefix("group: "));
    f.group = *group;
  }
  f.policy = c->ParamOr("policy");
  f.rule = c->ParamOr("rule");
  f.series = c->ParamOr("series");
  OnEngine(c, [this, c, f] {
    Result<AlertPage> page = ListAlerts(engine_.db(), f);
    if (!page) return c->Fail(page.status());
    c->Answer(
        Json(200, {{"alerts", page->alerts},
                   {"next_before", page->next_before ? json(*page->next_before) : json(nullptr)}}));
  });
}

namespace {

Result<std::int64_t> AlertId(const std::string& text) {
  Result<std::int64_t> id = ParseWholeNumber(text, 1, INT64_MAX);
  if (!id) return Status::NotFound("no such alert: " + text.substr(0, 40));
  return id;
}

}  // namespace

void Api::AlertDetail(const std::shared_ptr<Call>& c) {
  Result<std::int64_t> id = AlertId(c->id_text);
  if (!id) return c->Fail(id.status());
  OnEngine(c, [this, c, id = *id] {
    Result<json> alert = AlertWithHistory(engine_.db(), id);
    if (!alert) return c->Fail(alert.status());
    (*alert)["diagnosis"] = DiagnosisJson(engine_, *alert);
    c->Answer(Json(200, *alert));
  });
}

void Api::AlertAct(const std::shared_ptr<Call>& c) {
  Result<std::int64_t> id_or = AlertId(c->id_text);
  if (!id_or) return c->Fail(id_or.status());
  const std::int64_t id = *id_or;
  const std::string pattern = c->route->pattern;
  const std::string action = pattern.substr(pattern.rfind('/') + 1);
  Result<Body> body = Body::Parse(c->request.body, "{\"by\": \"name\", \"note\": \"...\"}");
  if (!body) return c->Fail(body.status());
  const bool named = !Actor(*c, "").empty();
  Result<std::string> by =
      body->Text("by", !named, "say who does this (kept in the alert's history)");
  if (!by) return c->Fail(by.status());
  *by = Actor(*c, *by);
  Result<std::string> note = body->Text("note", false, "a note kept in the alert's history");
  if (!note) return c->Fail(note.status());
  std::string until;
  std::optional<std::int64_t> until_ms;
  if (action == "snooze") {
    Result<std::string> u = body->Text("until", true,
                                       "a period of the series' policy (2026-W50, 2026-12, "
                                       "2026-12-05) or an ISO 8601 time (2026-12-05T10:00:00Z)");
    if (!u) return c->Fail(u.status());
    until = *u;
    std::int64_t ms = 0;
    if (until.find('T') != std::string::npos) {
      if (!ParseIsoTime(until, ms))
        return c->Fail(
            Status::Invalid("field until: not an ISO 8601 time with Z or an offset: " + until));
      until_ms = ms;
    }
  }
  OnEngine(c, [=, this, by = *by, note = *note] {
    Status done = engine_.AlertAction([&](AlertBook& book, std::int64_t now) -> Status {
      if (action == "acknowledge") return book.Acknowledge(id, by, note, now);
      if (action == "resolve") return book.ResolveByHand(id, by, note, now);
      std::optional<std::int64_t> until_period;
      if (!until_ms) {
        // a period of the alert's policy
        Result<std::string> policy_name = book.PolicyOf(id);
        if (!policy_name) return policy_name.status();
        const config::Policy* policy = nullptr;
        for (const auto& p : engine_.settings().policies)
          if (p.name == *policy_name) policy = &p;
        if (!policy)
          return Status::NotFound("no alert " + std::to_string(id) + " of a known policy");
        const monitors::PeriodParse parsed = monitors::ParsePeriod(policy->period, until);
        if (!parsed.ok()) return Status::Invalid("field until: " + parsed.error);
        until_period = parsed.ordinal;
      } else if (*until_ms <= now) {
        return Status::Invalid("field until: the time has passed");
      }
      return book.Snooze(id, until_period, until, until_ms, by, note, now);
    });
    if (!done) return c->Fail(done);
    Result<json> alert = AlertObject(engine_.db(), id);
    if (!alert) return c->Fail(alert.status());
    c->Answer(Json(200, *alert));
  });
}

void Api::DeliveryList(const std::shared_ptr<Call>& c) {
  const std::string state = c->ParamOr("state", "dead"), sink = c->ParamOr("sink");
  if (state != "dead" && state != "pending" && state != "delivered")
    return c->Fail(Status::Invalid("state must be dead, pending or delivered"));
  OnEngine(c, [this, c, state, sink] {
    Result<json> list = ListDeliveries(engine_.db(), state, sink);
    if (!list) return c->Fail(list.status());
    c->Answer(Json(200, {{"deliveries", *list}}));
  });
}

void Api::DeliveryRetry(const std::shared_ptr<Call>& c) {
  const std::string sink = c->ParamOr("sink");
  OnEngine(c, [this, c, sink] {
    long changed = 0;
    Status done = engine_.AlertAction([&](AlertBook& book, std::int64_t now) -> Status {
      Result<long> n = book.RequeueDead(sink, now);
      if (!n) return n.status();
      changed = *n;
      return Status::Ok();
    });
    if (!done) return c->Fail(done);
    c->Answer(Json(200, {{"requeued", changed}}));
  });
}

void Api::Attention(const std::shared_ptr<Call>& c) {
  AttentionQuery q;
  Result<std::int64_t> limit = ParseWholeNumber(c->ParamOr("limit", "50"), 1, 500);
  if (!limit) return c->Fail(Status(limit.status()).Prefix("limit: "));
  Result<std::int64_t> offset = ParseWholeNumber(c->ParamOr("offset", "0"), 0, 100000000);
  if (!offset) return c->Fail(Status(offset.status()).Prefix("offset: "));
  Result<std::int64_t> recent = ParseWholeNumber(c->ParamOr("recent", "26"), 0, 104);
  if (!recent) return c->Fail(Status(recent.status()).Prefix("recent: "));
  q.limit = static_cast<long>(*limit);
  q.offset = static_cast<long>(*offset);
  q.recent = static_cast<int>(*recent);
  if (auto near = c->Param("near")) {
    double v = 0;
    if (!ParseNumber(*near, v)) return c->Fail(Status::Invalid("near: not a number: " + *near));
    q.near = v;
  }
  const std::string state = c->ParamOr("state");
  if (!state.empty()) q.state = state;
  q.policy = c->ParamOr("policy");
  q.label = c->ParamOr("label");
  q.rule = c->ParamOr("rule");
  q.severity = c->ParamOr("severity");
  q.q = c->ParamOr("q");
  if (Status ok = CheckAttentionQuery(q); !ok) return c->Fail(ok);
  // The read view and the alert sums on the engine, the pass over them on the reader thread,
  // the page's rows on the engine.
  OnEngine(c, [this, c, q] {
    std::shared_ptr<const ReadView> view = engine_.ReadSnapshot();
    auto sums = std::make_shared<const AlertSums>(TallyAlerts(engine_));
    OffEngine(c, [this, c, q, view, sums] {
      Result<AttentionPick> pick = PickAttention(*view, *sums, q);
      if (!pick) return c->Fail(pick.status());
      auto picked = std::make_shared<const AttentionPick>(std::move(*pick));
      OnEngine(c, [this, c, q, view, picked] {
        Result<json> page = AttentionRows(engine_, *view, *picked, q);
        if (!page) return c->Fail(page.status());
        c->Answer(Json(200, *page));
      });
    });
  });
}

void Api::AccessInfo(const std::shared_ptr<Call>& c) {
  const std::shared_ptr<const Access> shared = access();
  const Access& access = *shared;
  const std::optional<Person> person = access.Identify(c->request.authorization);
  json you = nullptr;
  if (person)
    you = {{"name", person->name.empty() ? json(nullptr) : json(person->name)},
           {"role", RoleName(person->role)}};
  // What the caller may do now: open services allow everything.
  const Role role = access.open() ? Role::kOperator : person ? person->role : Role::kRead;
  const bool reads = access.open() || !access.reads_need_token() || person;
  const bool token_given = !c->request.authorization.empty();
  json may = {{"read", reads},
              {"work_alerts", (access.open() || person) && role >= Role::kPlanner},
              {"operate", (access.open() || person) && role >= Role::kOperator}};
  c->Answer(Json(200, {{"mode", access.mode()},
                       {"reads_need_token", access.reads_need_token()},
                       {"token_accepted", token_given ? json(person.has_value()) : json(nullptr)},
                       {"names_recorded", person && !person->name.empty()},
                       {"you", you},
                       {"may", may}}));
}

void Api::Page(const std::shared_ptr<Call>& c) {
  const std::string name = c->id_text.empty() ? "index.html" : c->id_text;
  const PageFile* file = FindPageFile(name);
  if (!file || (name == "index.html" && !c->id_text.empty()))
    return c->Fail(Status::NotFound("no such page file: " + name.substr(0, 64)));
  HttpResponse r;
  r.content_type = file->content_type;
  r.headers.emplace_back("Content-Security-Policy", PageSecurityPolicy());
  r.headers.emplace_back("X-Frame-Options", "DENY");
  r.headers.emplace_back("Referrer-Policy", "no-referrer");
  r.headers.emplace_back("Cache-Control", "no-cache");
  r.headers.emplace_back("ETag", file->etag);
  if (c->request.if_none_match == file->etag) {
    r.status = 304;
    return c->Answer(std::move(r));
  }
  r.body = std::string(file->body);
  c->Answer(std::move(r));
}

void Api::Ingest(const std::shared_ptr<Call>& c) {
  if (sharing_)
    return c->Answer(Error(409,
                           "this instance shares its series with others through Kafka "
                           "(kafka.changelog_topic): send actuals to the source topic"));
  const HttpRequest& request = c->request;
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
    return c->Answer(Error(415, "send text/csv (series,period,value) or application/x-ndjson"));
  }
  if (batch.too_many_rows) {
    counters_.rejected_too_many_rows.fetch_add(1);
    return c->Answer(Error(413, "more than max_rows_per_batch (" +
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
    return c->Answer(Json(400, problems_json(batch.problems, batch.problem_count)));
  }
  const auto received = std::chrono::steady_clock::now();
  const std::size_t rows = batch.rows.size();
  auto answer = [this, c, problems_json, received, rows](IngestReply r) {
    switch (r.status) {
      case IngestReply::Status::kOk:
        if (metrics_)
          metrics_->ObserveBatch(
              rows,
              std::chrono::duration<double>(std::chrono::steady_clock::now() - received).count());
        return c->Answer(Json(200, {{"rows", r.counts.rows},
                                    {"applied", r.counts.applied},
                                    {"unchanged", r.counts.unchanged},
                                    {"restated", r.counts.restated},
                                    {"gap_periods_filled", r.counts.filled},
                                    {"new_series", r.counts.new_series},
                                    {"alerts_opened", r.counts.alerts_opened},
                                    {"alerts_resolved", r.counts.alerts_resolved}}));
      case IngestReply::Status::kRejected:
        counters_.rejected_bad_input.fetch_add(1);
        return c->Answer(Json(400, problems_json(r.problems, r.problem_count)));
      case IngestReply::Status::kUnavailable: {
        counters_.rejected_unavailable.fetch_add(1);
        HttpResponse out = Error(503, "the store is failing; nothing was applied: " + r.error);
        return c->Answer(std::move(out));
      }
    }
  };
  // The reply runs on the engine thread after the commit: behind the same guard as any handler.
  const bool queued = engine_.Submit(std::move(batch.rows), [this, c, answer](IngestReply r) {
    try {
      answer(std::move(r));
    } catch (const std::exception& e) {
      Internal(*c, e.what());
    }
  });
  if (!queued) {
    counters_.rejected_queue_full.fetch_add(1);
    c->Fail(Status::Busy("the engine queue is full; retry later"));
  }
}

}  // namespace forewarden
