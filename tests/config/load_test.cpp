#include "config/load.h"

#include <catch2/catch.hpp>
#include <fstream>
#include <set>

using config::LoadSettingsFile;
using config::LoadSettingsText;

namespace {
std::string AllProblems(const config::LoadResult& r) {
  std::string s;
  for (const auto& p : r.problems) s += p.ToString() + "\n";
  return s;
}
}  // namespace

TEST_CASE("the commented example config and the demo config load cleanly", "[unit]") {
  for (const char* name : {"forewarden.example.yaml", "demo.yaml"}) {
    auto r = LoadSettingsFile(std::string(FOREWARDEN_SOURCE_DIR) + "/config/" + name);
    INFO(AllProblems(r));
    REQUIRE(r.ok());
    CHECK(r.settings.policies.size() >= 3);
  }
  auto r = LoadSettingsFile(std::string(FOREWARDEN_SOURCE_DIR) + "/config/forewarden.example.yaml");
  const config::Policy& p = r.settings.policies[0];
  CHECK(p.name == "garden-weekly");
  CHECK(p.match.key == "north/*");
  REQUIRE(p.match.labels.size() == 1);
  CHECK(p.spec.adaptive.enabled);
  CHECK(p.spec.adaptive.cap == 0.8);
  CHECK(p.spec.rules.size() == 4);
  CHECK(p.spec.rules[0].persistence == 2);
  CHECK(p.spec.rules[2].direction == monitors::Direction::kUnder);
}

TEST_CASE("every problem is reported with file, line, column and key path", "[unit]") {
  auto r = LoadSettingsText(
      "policies:\n"
      "  - name: a\n"
      "    match: \"*\"\n"
      "    period: fortnight\n"
      "    method: arima\n"
      "    alpha: 1.5\n"
      "    colour: blue\n"
      "    rules:\n"
      "      - {name: x, signal: trigg, limit: 2}\n",
      "bad.yaml");
  REQUIRE(r.problems.size() == 5);
  const std::string all = AllProblems(r);
  CHECK_THAT(all,
             Catch::Contains(
                 "bad.yaml:4:13: policies[0].period: must be day, week or month, got 'fortnight'"));
  CHECK_THAT(all, Catch::Contains("bad.yaml:5:13: policies[0].method: must be ses, holt"));
  CHECK_THAT(all, Catch::Contains("bad.yaml:6:12: policies[0].alpha: must be in [0, 1], got 1.5"));
  CHECK_THAT(all, Catch::Contains("bad.yaml:7:5: policies[0].colour: unknown key"));
  CHECK_THAT(all, Catch::Contains("policies[0].rules[0].limit: must be in (0, 1), got 2"));
}

TEST_CASE("settings that cannot work are refused", "[unit]") {
  struct Case {
    const char* yaml;
    const char* message;
  };
  const Case cases[] = {
      {"policies: []\n", "policies: must be a non-empty list"},
      {"policies:\n  - {name: a, period: week}\n", "a policy needs 'match'"},
      {"policies:\n  - {name: a, match: '*', period: week, method: seasonal-add}\n",
       "needs 'season_length'"},
      {"policies:\n  - {name: a, match: '*', period: week, method: seasonal-add, season_length: 4, "
       "start: first-actual}\n",
       "seasonal methods need seasonal start values"},
      {"policies:\n  - {name: a, match: '*', period: week, method: seasonal-add, season_length: 4, "
       "start: {mean_of_first: 6}}\n",
       "mean_of_first must be a multiple of season_length (4)"},
      {"policies:\n  - {name: a, match: '*', period: week, method: seasonal-mul, season_length: 4, "
       "start: {level: 1, season: [1, 1]}}\n",
       "exactly season_length (4) season values, got 2"},
      {"policies:\n  - {name: a, match: '*', period: week, method: croston, adaptive: {}}\n",
       "croston and sba do not take an adaptive alpha"},
      {"policies:\n  - {name: a, match: '*', period: week, method: ses, trend_beta: 0.1}\n",
       "method ses has no trend"},
      {"policies:\n  - {name: a, match: '*', period: week, signal_beta: 0}\n",
       "signal_beta: must be in (0, 1], got 0"},
      {"policies:\n  - {name: a, match: '*', period: week, warmup: -1}\n",
       "warmup: must be in [0, 100000], got -1"},
      {"policies:\n  - {name: a, match: '*', period: week, alpha: abc}\n",
       "alpha: must be a number, got 'abc'"},
      {"policies:\n  - {name: a, match: '*', period: week, alpha: .nan}\n",
       "alpha: must be a finite number"},
      {"policies:\n  - {name: a, match: '*', period: week}\n  - {name: a, match: '*', period: "
       "day}\n",
       "policy name 'a' is used twice"},
      {"policies:\n  - {name: a, match: '*', period: week, rules: [{name: r, signal: cusum, limit: "
       "4, clear: 5}]}\n",
       "clear: must not exceed the limit"},
      {"policies:\n  - {name: a, match: '*', period: week, start: {fitted: 2}}\n",
       "fitted needs at least 3 periods"},
      {"policies:\n  - {name: a, match: '*', period: week, gaps: fill}\n",
       "gaps: must be zero or skip"},
      {"policies: [\n", "not valid YAML"},
      {"policies:\n  - {name: a, match: '*', period: week, in_control: {demand_probability: "
       "0.2}}\n",
       "only croston and sba policies take in_control"},
      {"policies:\n  - {name: a, match: '*', period: week, method: sba, in_control: "
       "{demand_probability: 0}}\n",
       "in_control.demand_probability: must be in (0, 1], got 0"},
      {"policies:\n  - {name: a, match: '*', period: week, method: sba, in_control: "
       "{demand_probability: 1.5}}\n",
       "must be in (0, 1], got 1.5"},
      {"policies:\n  - {name: a, match: '*', period: week, method: croston, in_control: "
       "{size_mean: -1}}\n",
       "in_control.size_mean: must be in (0, 1e+12], got -1"},
      {"policies:\n  - {name: a, match: '*', period: week, method: sba, in_control: "
       "{size_sd: .nan}}\n",
       "in_control.size_sd"},
      {"policies:\n  - {name: a, match: '*', period: week, method: sba, in_control: "
       "{chance: 0.2}}\n",
       "chance"},
      {"policies:\n  - {name: a, match: '*', period: week, method: sba, in_control: 0.2}\n",
       "in_control: must be a map"},
      {"policies:\n  - {name: a, match: '*', period: week, rules: [{name: r, signal: bias, limit: "
       "0.2}]}\n",
       "a bias rule needs 'periods'"},
      {"policies:\n  - {name: a, match: '*', period: week, rules: [{name: r, signal: stale, "
       "periods: 3, limit: 2}]}\n",
       "a stale rule takes 'periods', not 'limit'"},
      {"policies:\n  - {name: a, match: '*', period: week, rules: [{name: r, signal: alpha_at_cap, "
       "periods: 3}]}\n",
       "an alpha_at_cap rule needs an adaptive policy"},
      {"policies:\n  - {name: a, match: '*', period: week, rules: [{name: r, signal: trigg, limit: "
       "0.5, false_alert_every: 52}]}\n",
       "give either 'limit' or 'false_alert_every'"},
      {"policies:\n  - {name: a, match: '*', period: week, rules: [{name: r, signal: cusum, limit: "
       "4, escalate_limit: 3}]}\n",
       "escalate_limit: must be beyond the limit"},
      {"policies:\n  - {name: a, match: '*', period: week, rules: [{name: r, signal: cusum, limit: "
       "4, severity: critical, escalate_limit: 6}]}\n",
       "escalate_severity must be above"},
      {"policies:\n  - {name: a, match: '*', period: week, rules: [{name: r, signal: accuracy, "
       "periods: 4, limit: 0.3, direction: over-forecast}]}\n",
       "this signal has no direction"},
      {"policies:\n  - {name: a, match: '*', period: week}\nalerts: {sinks: [{name: w, type: "
       "webhook, url: 'ftp://x'}]}\n",
       "needs an http:// or https:// URL"},
      {"policies:\n  - {name: a, match: '*', period: week}\nalerts: {sinks: [{name: w, type: "
       "webhook, url: 'http://x', ca_file: /etc/ca.pem}]}\n",
       "a CA file needs an https:// url"},
      {"policies:\n  - {name: a, match: '*', period: week}\nalerts: {sinks: [{name: w, type: "
       "webhook, url: 'http://x', secret_env: S, previous_secret_file: /s}]}\n",
       "previous_secret_file and previous_key_id come together"},
      {"server: {tls_cert_file: /c.pem}\npolicies:\n  - {name: a, match: '*', period: week}\n",
       "tls_cert_file and tls_key_file come together"},
      {"server: {tls_terminated_by_proxy: maybe}\npolicies:\n  - {name: a, match: '*', period: "
       "week}\n",
       "must be true or false"},
      {"policies:\n  - {name: a, match: '*', period: week, method: croston, negative_actuals: "
       "accept}\n",
       "cannot take negative actuals"},
      {"policies:\n  - {name: a, match: '*', period: week, negative_actuals: sometimes}\n",
       "must be refuse or accept"},
      {"server: {max_series: 0}\npolicies:\n  - {name: a, match: '*', period: week}\n",
       "max_series"},
      {"server: {token_for_reads: maybe}\npolicies:\n  - {name: a, match: '*', period: week}\n",
       "server.token_for_reads: must be true or false, got 'maybe'"},
      {"server: {token_for_reads: true}\npolicies:\n  - {name: a, match: '*', period: week}\n",
       "token_for_reads needs token_file, token_env or people_file"},
      {"server: {people_file: [a, b]}\npolicies:\n  - {name: a, match: '*', period: week}\n",
       "people_file"},
      {"server: {read_queue_depth: 0}\npolicies:\n  - {name: a, match: '*', period: week}\n",
       "read_queue_depth: must be in [1, 100000], got 0"},
      {"server: {read_queue_depth: lots}\npolicies:\n  - {name: a, match: '*', period: week}\n",
       "read_queue_depth"},
      {"policies:\n  - {name: a, match: '*', period: week}\nalerts: {sinks: [{name: l, type: log, "
       "secret_env: X}]}\n",
       "only webhook sinks take a secret"},
      {"policies:\n  - {name: a, match: '*', period: week}\nalerts: {initial_backoff_seconds: 10, "
       "max_backoff_seconds: 5}\n",
       "must not be below initial_backoff_seconds"},
  };
  for (const Case& c : cases) {
    auto r = LoadSettingsText(c.yaml, "t.yaml");
    INFO(c.yaml);
    INFO(AllProblems(r));
    CHECK_FALSE(r.ok());
    CHECK_THAT(AllProblems(r), Catch::Contains(c.message));
  }
}

TEST_CASE("series take the first policy whose key glob and labels match", "[unit]") {
  auto r = LoadSettingsText(
      "policies:\n"
      "  - {name: web, match: {key: 'north/*', labels: {channel: web}}, period: day}\n"
      "  - {name: north, match: 'north/*', period: week}\n"
      "  - {name: slow, match: '*/sku-9????"
      "', period: week}\n",
      "m.yaml");
  REQUIRE(r.ok());
  auto name = [&](const char* key, std::vector<std::pair<std::string, std::string>> labels = {}) {
    const config::Policy* p = config::FindPolicy(r.settings, key, labels);
    return p ? p->name : std::string("-");
  };
  CHECK(name("north/store-1/sku-1", {{"channel", "web"}}) == "web");
  CHECK(name("north/store-1/sku-1") == "north");
  CHECK(name("south/store-1/sku-91234") == "slow");
  CHECK(name("south/store-1/sku-912345") == "-");
  CHECK(config::GlobMatch("*", ""));
  CHECK(config::GlobMatch("a*b*c", "a-x-b-y-c"));
  CHECK_FALSE(config::GlobMatch("a*b*c", "a-x-c-y-b"));
}

TEST_CASE("the server section and the fallback policy load with their defaults and bounds",
          "[unit]") {
  auto r = LoadSettingsText(
      "server:\n"
      "  listen: 127.0.0.1:9100\n"
      "  synchronous: normal\n"
      "  max_rows_per_batch: 5000\n"
      "fallback_policy: rest\n"
      "policies:\n"
      "  - {name: north, match: 'north/*', period: week, history: 52, stale_after: 3}\n"
      "  - {name: rest, match: 'never/*', period: week}\n",
      "s.yaml");
  INFO(AllProblems(r));
  REQUIRE(r.ok());
  CHECK(r.settings.server.listen == "127.0.0.1:9100");
  CHECK(r.settings.server.synchronous == config::Synchronous::kNormal);
  CHECK(r.settings.server.max_rows_per_batch == 5000);
  CHECK(r.settings.server.queue_depth == 64);
  CHECK(r.settings.policies[0].history == 52);
  CHECK(config::FindPolicy(r.settings, "south/x")->name == "rest");
  auto bad = LoadSettingsText(
      "server: {listen: nowhere, synchronous: off, queue_depth: 0, token_file: a, token_env: B}\n"
      "fallback_policy: missing\n"
      "policies:\n  - {name: a, match: '*', period: week}\n",
      "b.yaml");
  const std::string all = AllProblems(bad);
  CHECK_THAT(all, Catch::Contains("server.listen: must be HOST:PORT"));
  CHECK_THAT(all, Catch::Contains("server.synchronous: must be full or normal"));
  CHECK_THAT(all, Catch::Contains("server.queue_depth: must be in [1, 100000], got 0"));
  CHECK_THAT(all, Catch::Contains("give token_file or token_env, not both"));
  CHECK_THAT(all, Catch::Contains("fallback_policy: names no policy: 'missing'"));
}

TEST_CASE("a false-alarm budget becomes a derived limit, shown with its expected rate", "[unit]") {
  auto r = LoadSettingsText(
      "policies:\n"
      "  - name: a\n    match: '*'\n    period: day\n    alpha: 0.1\n    signal_beta: 0.1\n"
      "    rules:\n"
      "      - {name: drift, signal: cusum, false_alert_every: 1000, clear_fraction: 0.5}\n"
      "      - {name: gone, signal: stale, periods: 3, resolve_after: 2}\n",
      "t.yaml");
  INFO(AllProblems(r));
  REQUIRE(r.ok());
  const config::Policy& p = r.settings.policies[0];
  REQUIRE(p.calibrations.size() == 1);
  const monitors::RuleSpec& drift = p.spec.rules[0];
  // derived, not configured: far beyond the textbook 4 MADs (16 % of in-control periods beyond
  // it at alpha 0.1 even from a perfect start, REFERENCES.md C36, simulated by
  // tests/reference/simulated_tables.py), because C also keeps the error of each series' start
  // (monitors/calibrate.h)
  CHECK(drift.limit > 8.0);
  CHECK(drift.limit < 60.0);
  CHECK(drift.clear == Approx(0.5 * drift.limit));
  CHECK(p.calibrations[0].limit == drift.limit);
  CHECK(p.calibrations[0].per_series_week == Approx(7.0 / 1000));
  CHECK(p.spec.rules[1].limit == 2.5);
  CHECK(p.spec.rules[1].resolve_after == 2);
  // limits by age: the rule carries them and the calibration reports them. C sums the errors of
  // a series' life, so its in-control spread grows with age for about 1/alpha periods before it
  // settles (the time-varying EWMA limits of Lucas and Saccucci 1990 widen the same way): young
  // series get narrower limits here, where a Trigg rule on a trend method gets wider ones
  // (tests/monitors/calibrate_test.cpp).
  REQUIRE(drift.young.size() == 6);
  CHECK(p.calibrations[0].young.size() == 6);
  CHECK(drift.young.front().limit < 0.8 * drift.limit);
  CHECK(drift.young.front().clear == Approx(0.5 * drift.young.front().limit));
  CHECK(monitors::LimitsAt(drift, 0).limit == drift.young.front().limit);
  CHECK(monitors::LimitsAt(drift, 127).limit == drift.young.back().limit);
  CHECK(monitors::LimitsAt(drift, 128).limit == drift.limit);
  // no alerts section: one log sink
  REQUIRE(r.settings.alerts.sinks.size() == 1);
  CHECK(r.settings.alerts.sinks[0].kind == config::Sink::Kind::kLog);
}

TEST_CASE("an intermittent policy's in-control demand changes the limits derived on it", "[unit]") {
  const std::string head =
      "policies:\n  - name: a\n    match: '*'\n    period: week\n    method: sba\n"
      "    alpha: 0.1\n    warmup: 8\n";
  const std::string rules =
      "    rules:\n      - {name: bias, signal: trigg, false_alert_every: 500}\n";
  auto usual = LoadSettingsText(head + rules, "t.yaml");
  auto sparse = LoadSettingsText(
      head + "    in_control: {demand_probability: 0.1, size_mean: 2, size_sd: 1}\n" + rules,
      "t.yaml");
  INFO(AllProblems(usual) << AllProblems(sparse));
  REQUIRE(usual.ok());
  REQUIRE(sparse.ok());
  const monitors::PolicySpec& s = sparse.settings.policies[0].spec;
  CHECK(s.in_control.probability == 0.1);
  CHECK(s.in_control.size_mean == 2);
  CHECK(s.in_control.size_sd == 1);
  CHECK(usual.settings.policies[0].spec.in_control.probability == Approx(1.0 / 3));
  // sparser demand: each demand is a larger surprise, so Trigg's signal swings wider
  CHECK(s.rules[0].limit != usual.settings.policies[0].spec.rules[0].limit);
}

TEST_CASE("the README's settings reference lists exactly the keys the loader takes", "[unit]") {
  std::ifstream in(std::string(FOREWARDEN_SOURCE_DIR) + "/README.md");
  REQUIRE(in);
  std::string line;
  bool inside = false;
  std::set<std::string> documented;
  while (std::getline(in, line)) {
    if (line.rfind("#", 0) == 0) inside = line == "#### Settings reference";  // any heading ends it
    if (!inside || line.rfind("| `", 0) != 0) continue;
    const std::size_t end = line.find('`', 3);
    REQUIRE(end != std::string::npos);
    documented.insert(line.substr(3, end - 3));
  }
  const std::vector<std::string> keys = config::SettingsKeys();
  const std::set<std::string> loaded(keys.begin(), keys.end());
  for (const std::string& k : loaded) {
    INFO("missing from the README: " << k);
    CHECK(documented.count(k) == 1);
  }
  for (const std::string& k : documented) {
    INFO("in the README, unknown to the loader: " << k);
    CHECK(loaded.count(k) == 1);
  }
}

TEST_CASE("adaptive.lag takes the words yaml-cpp takes for a boolean, read without it", "[unit]") {
  // Read by our own code: yaml-cpp's bool conversion writes a shared buffer, and tune loads
  // settings on several threads at once (found by ThreadSanitizer).
  auto lag = [](const std::string& word, bool& lagged) {
    const config::LoadResult r = LoadSettingsText(
        "policies:\n  - {name: p, match: '*', period: week, adaptive: {lag: " + word + "}}\n",
        "s.yaml");
    if (r.ok()) lagged = r.settings.policies[0].spec.adaptive.lagged;
    return r;
  };
  for (const char* word : {"true", "True", "TRUE", "yes", "Yes", "y", "on", "ON"}) {
    bool lagged = false;
    INFO(word);
    CHECK(lag(word, lagged).ok());
    CHECK(lagged);
  }
  for (const char* word : {"false", "False", "no", "NO", "n", "off", "Off"}) {
    bool lagged = true;
    INFO(word);
    CHECK(lag(word, lagged).ok());
    CHECK_FALSE(lagged);
  }
  for (const char* word : {"tRue", "maybe", "1", "''", "[true]"}) {
    bool lagged = true;
    INFO(word);
    const config::LoadResult r = lag(word, lagged);
    REQUIRE_FALSE(r.ok());
    CHECK(r.problems.front().ToString().find("policies[0].adaptive.lag: must be true or false") !=
          std::string::npos);
  }
}
