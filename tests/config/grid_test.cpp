#include "config/grid.h"

#include <algorithm>
#include <catch2/catch.hpp>

#include "config/load.h"

namespace {

config::Settings Demo() {
  const config::LoadResult l = config::LoadSettingsText(
      "policies:\n"
      "  - name: steady\n"
      "    match: '*/sku-1*'\n"
      "    period: week\n"
      "    alpha: 0.12\n"
      "    rules:\n"
      "      - {name: drift, signal: trigg, limit: 0.8}\n"
      "  - name: slow\n"
      "    match: '*/sku-9*'\n"
      "    period: week\n"
      "    method: sba\n"
      "    alpha: 0.1\n"
      "  - name: trend\n"
      "    match: '*'\n"
      "    period: week\n"
      "    method: damped\n"
      "    alpha: 0.2\n"
      "    trend_beta: 0.05\n"
      "    damping: 0.9\n"
      "    adaptive: {floor: 0.1, cap: 0.7}\n"
      "    rules:\n"
      "      - {name: pinned, signal: alpha_at_cap, periods: 4}\n",
      "s.yaml");
  REQUIRE(l.ok());
  return l.settings;
}

const config::GridAxes& Axes(const config::GridLoad& g, const std::string& name) {
  for (const auto& [n, a] : g.grid.policies)
    if (n == name) return a;
  FAIL("no policy " << name);
  return g.grid.policies.front().second;
}

std::string Problems(const config::GridLoad& g) {
  std::string all;
  for (const auto& p : g.problems) all += p.ToString() + "\n";
  return all;
}

}  // namespace

TEST_CASE("the default grid puts each policy's current values first and fits its method",
          "[unit]") {
  const config::Settings s = Demo();
  const config::GridLoad g = config::LoadTuneGrid("", s, false);
  REQUIRE(g.ok());
  const config::GridAxes& steady = Axes(g, "steady");
  CHECK(steady.alpha == std::vector<double>{0.12, 0.05, 0.1, 0.15, 0.2, 0.3, 0.4, 0.5});
  CHECK(steady.trend_beta.size() == 1);
  REQUIRE(steady.adaptive.size() == 2);
  CHECK_FALSE(steady.adaptive[0].enabled);  // now: off
  CHECK(steady.adaptive[1].enabled);
  CHECK(steady.false_alert_scale == std::vector<double>{1.0});
  const config::GridAxes& slow = Axes(g, "slow");
  CHECK(slow.adaptive.size() == 1);  // croston/sba: never adaptive
  CHECK(slow.candidates() == 5);
  const config::GridAxes& trend = Axes(g, "trend");
  CHECK(trend.damping == std::vector<double>{0.9, 0.85, 0.95});
  CHECK(trend.trend_beta == std::vector<double>{0.05, 0.02, 0.1});
  // an alpha_at_cap rule needs adaptive on: the only adaptive value is the current one
  REQUIRE(trend.adaptive.size() == 1);
  CHECK(trend.adaptive[0].cap == 0.7);
}

TEST_CASE("a grid file replaces axes, from default: where they apply and per policy", "[unit]") {
  const config::Settings s = Demo();
  const config::GridLoad g = config::LoadTuneGridText(
      "default:\n  alpha: [0.3]\n  damping: [0.8]\n  adaptive: [off]\n"
      "policies:\n  trend:\n    trend_beta: 0.2\n    max_alerts_per_1000: 2.5\n"
      "max_candidates: 50\n",
      "g.yaml", s, false);
  INFO(Problems(g));
  REQUIRE(g.ok());
  CHECK(Axes(g, "steady").alpha == std::vector<double>{0.12, 0.3});
  CHECK(Axes(g, "steady").adaptive.size() == 1);
  CHECK(Axes(g, "trend").trend_beta == std::vector<double>{0.05, 0.2});
  CHECK(Axes(g, "trend").damping == std::vector<double>{0.9, 0.8});
  CHECK(Axes(g, "trend").max_alerts_per_1000 == 2.5);
  CHECK(g.grid.max_candidates == 50);
}

TEST_CASE("a bad grid is refused with file, line, column and key", "[unit]") {
  const config::Settings s = Demo();
  struct Case {
    const char* text;
    const char* want;
  } cases[] = {
      {"default:\n  alpha: [0.1]\n  beta: [0.2]\n", "g.yaml:3:3: default.beta: unknown key"},
      {"default:\n  alpha: [0.1, 1.5]\n",
       "g.yaml:2:16: default.alpha[1]: must be in (0, 1], got 1.5"},
      {"default:\n  alpha: [0.1, x]\n", "g.yaml:2:16: default.alpha[1]: must be a number, got 'x'"},
      {"default:\n  alpha: []\n", "g.yaml:2:10: default.alpha: must list 1 to 100 values"},
      {"policies:\n  nightly: {alpha: 0.2}\n",
       "g.yaml:2:3: policies.nightly: no policy of the settings has this name"},
      {"policies:\n  steady: {season_gamma: 0.2}\n",
       "g.yaml:2:26: policies.steady.season_gamma: this policy has no seasons"},
      {"policies:\n  slow:\n    adaptive: [off]\n",
       "g.yaml:3:15: policies.slow.adaptive: policy 'slow' (croston/sba) takes no adaptive alpha"},
      {"policies:\n  trend:\n    adaptive: [off]\n",
       "g.yaml:3:16: policies.trend.adaptive[0]: policy 'trend' has an alpha_at_cap rule, which "
       "needs adaptive on"},
      {"default:\n  adaptive: [{floor: 0.5, cap: 0.2}]\n",
       "g.yaml:2:14: default.adaptive[0]: floor must not be above cap"},
      {"default:\n  adaptive: [{floor: 0.1, top: 0.2}]\n",
       "g.yaml:2:27: default.adaptive[0].top: unknown key"},
      {"policies:\n  steady: {false_alert_scale: 2}\n",
       "g.yaml:2:31: policies.steady.false_alert_scale: this policy has no rule with "
       "false_alert_every"},
      {"max_candidates: 3\n",
       "policies.steady: 16 candidates for policy 'steady'; max_candidates is 3"},
      {"max_candidates: 0\n", "g.yaml:1:17: max_candidates: must be in [1, 1000000], got 0"},
      {"- alpha\n", "g.yaml:1:1: the grid must be a map"},
      {"default: {alpha: [0.1\n", "g.yaml:2:1: not valid YAML"},
  };
  for (const Case& c : cases) {
    const config::GridLoad g = config::LoadTuneGridText(c.text, "g.yaml", s, false);
    INFO(c.text);
    INFO(Problems(g));
    REQUIRE_FALSE(g.ok());
    CHECK(Problems(g).find(c.want) != std::string::npos);
  }
  const config::GridLoad missing = config::LoadTuneGrid("/nonexistent/grid.yaml", s, false);
  REQUIRE_FALSE(missing.ok());
  CHECK(missing.problems.front().ToString() == "/nonexistent/grid.yaml: cannot open the grid file");
}

TEST_CASE("the example grid file loads against the demo settings", "[unit]") {
  const config::LoadResult demo =
      config::LoadSettingsFile(FOREWARDEN_SOURCE_DIR "/config/demo.yaml");
  REQUIRE(demo.ok());
  const config::GridLoad g = config::LoadTuneGrid(
      FOREWARDEN_SOURCE_DIR "/config/tune-grid.example.yaml", demo.settings, false);
  INFO(Problems(g));
  REQUIRE(g.ok());
  CHECK(Axes(g, "slow-movers").false_alert_scale == std::vector<double>{1.0, 2.0});
  CHECK(Axes(g, "stores-weekly").max_alerts_per_1000 == 6.0);
  // every key the file names is one the loader takes
  const std::vector<std::string> keys = config::TuneGridKeys();
  for (const char* k : {"default.alpha", "default.adaptive[].cap", "policies.NAME.season_gamma",
                        "policies.NAME.false_alert_scale", "max_candidates"})
    CHECK(std::find(keys.begin(), keys.end(), k) != keys.end());
}
