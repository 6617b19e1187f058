#include "daemon/api/api.h"

#include <catch2/catch.hpp>
#include <future>
#include <stdexcept>

#include "config/load.h"
#include "tests/temp_dir.h"

using forewarden::Api;
using forewarden::Engine;
using forewarden::HttpRequest;
using forewarden::HttpResponse;
using testing_support::TempDir;

namespace {

std::shared_ptr<const config::Settings> Settings(const std::string& data) {
  auto r =
      config::LoadSettingsText("server: {data: '" + data +
                                   "'}\n"
                                   "policies:\n  - {name: weekly, match: 'w/*', period: week}\n",
                               "test.yaml");
  REQUIRE(r.ok());
  return std::make_shared<const config::Settings>(std::move(r.settings));
}

HttpRequest Request(const std::string& method, const std::string& target,
                    const std::string& body = "") {
  HttpRequest r;
  r.method = method;
  r.target = target;
  r.body = body;
  r.content_type = body.empty() ? "" : "application/json";
  return r;
}

// Sends one request; the first `throws` answers throw (a failure on the way out, such as a
// connection that cannot be written), the next is kept. Waits for it (every request is
// answered, possibly on the engine thread).
HttpResponse Send(Api& api, HttpRequest request, int throws) {
  auto answered = std::make_shared<std::promise<HttpResponse>>();
  auto left = std::make_shared<int>(throws);
  api.Handle(std::move(request), [answered, left](HttpResponse r) {
    if ((*left)-- > 0) throw std::runtime_error("the answer could not be written");
    answered->set_value(std::move(r));
  });
  return answered->get_future().get();
}

// A started engine on a temporary store with the API in front of it.
struct World {
  TempDir dir;
  std::shared_ptr<const config::Settings> settings = Settings(dir.File("data"));
  Engine engine{settings, [] { return std::int64_t{0}; }};
  Api api{engine, settings, forewarden::Access{}};
  World() {
    std::string error;
    REQUIRE(engine.Start().ok());
  }
  ~World() { engine.Stop(); }
};

}  // namespace

TEST_CASE("a handler that throws is answered 500, counted, and the service goes on",
          "[integration]") {
  World w;
  Api& api = w.api;
  // thrown while answering on the request's own thread
  HttpResponse r = Send(api, Request("GET", "/healthz"), 1);
  CHECK(r.status == 500);
  CHECK(r.body.find("the request failed inside the service") != std::string::npos);
  CHECK(api.counters().internal_errors.load() == 1);
  // thrown inside an engine job: the engine thread survives and the request still gets its 500
  r = Send(api, Request("GET", "/v1/series/w/none"), 1);
  CHECK(r.status == 500);
  CHECK(api.counters().internal_errors.load() == 2);
  // both threads still serve
  r = Send(api, Request("GET", "/v1/series/w/none"), 0);
  CHECK(r.status == 404);
  r = Send(api, Request("GET", "/healthz"), 0);
  CHECK(r.status == 200);
  CHECK(api.counters().internal_errors.load() == 2);
}

TEST_CASE("domain errors map to HTTP statuses in one place and bodies are checked field by field",
          "[unit]") {
  World w;
  struct Case {
    const char* method;
    const char* target;
    const char* body;
    int status;
    const char* text;
  } cases[] = {
      {"POST", "/v1/series/w/a/reset", R"({"to": 5, "who": "x"})", 400,
       "field to: must be a string"},
      {"POST", "/v1/series/w/a/reset", R"({"to": "last", "who": "x"})", 404, "no series 'w/a'"},
      {"POST", "/v1/alerts/1/resolve", R"({"by": "x"})", 404, "no alert 1"},
      {"POST", "/v1/alerts/0/resolve", R"({"by": "x"})", 404, "no such alert: 0"},
      {"GET", "/v1/series?limit=10001", "", 400, "limit: 10001 is outside 1..10000"},
      {"PUT", "/v1/series", "", 405, "use GET"},
      {"GET", "/v1/nothing", "", 404, "no such endpoint"},
  };
  for (const Case& c : cases) {
    INFO(c.method << " " << c.target << " " << c.body);
    HttpResponse r = Send(w.api, Request(c.method, c.target, c.body), 0);
    CHECK(r.status == c.status);
    CHECK(r.body.find(c.text) != std::string::npos);
  }
}
