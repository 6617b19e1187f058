#include "config/edit.h"

#include <catch2/catch.hpp>

#include "config/load.h"

namespace {

// A settings text in the styles people write: a block policy with a comment, a block
// adaptive map, flow rules, and a policy written as one flow map.
const char* kText =
    "# our weekly stores (comment kept: \xc3\xa9t\xc3\xa9 sales)\n"
    "policies:\n"
    "  - name: weekly\n"
    "    match: \"*/sku-1*\"   # steady lines\n"
    "    period: week\n"
    "    alpha: 0.1 # chosen in 2025\n"
    "    adaptive:\n"
    "      floor: 0.05\n"
    "      cap: 0.6\n"
    "    warmup: 4\n"
    "    rules:\n"
    "      - {name: drift, signal: trigg, limit: 0.8}\n"
    "      - {name: shift, signal: cusum, limit: 5, resolve_after: 2}\n"
    "  - {name: rest, match: '*', period: week, method: holt, alpha: 0.2}\n";

std::string Edit(const std::vector<config::KeyEdit>& edits) {
  std::string out, problem;
  const bool ok = config::EditSettingsText(kText, edits, out, problem);
  INFO(problem);
  REQUIRE(ok);
  const config::LoadResult loaded = config::LoadSettingsText(out, "edited.yaml");
  INFO(out);
  for (const auto& p : loaded.problems) INFO(p.ToString());
  REQUIRE(loaded.ok());
  return out;
}

std::string Replace(std::string text, const std::string& from, const std::string& to) {
  const std::size_t at = text.find(from);
  REQUIRE(at != std::string::npos);
  text.replace(at, from.size(), to);
  return text;
}

}  // namespace

TEST_CASE("a policy's scalar key is replaced in place, its comment kept", "[unit]") {
  const std::string out = Edit({{"weekly", "", "alpha", "0.25"}});
  CHECK(out == Replace(kText, "alpha: 0.1 # chosen", "alpha: 0.25 # chosen"));
}

TEST_CASE("a missing key is added under the policy's name, at its indentation", "[unit]") {
  const std::string out = Edit({{"weekly", "", "signal_beta", "0.2"}});
  CHECK(out == Replace(kText, "  - name: weekly\n", "  - name: weekly\n    signal_beta: 0.2\n"));
}

TEST_CASE("a block map value is replaced whole, and removed whole", "[unit]") {
  const std::string set = Edit({{"weekly", "", "adaptive", "{floor: 0.1, cap: 0.5, lag: false}"}});
  CHECK(set == Replace(kText, "    adaptive:\n      floor: 0.05\n      cap: 0.6\n",
                       "    adaptive: {floor: 0.1, cap: 0.5, lag: false}\n"));
  const std::string off = Edit({{"weekly", "", "adaptive", std::nullopt}});
  CHECK(off == Replace(kText, "    adaptive:\n      floor: 0.05\n      cap: 0.6\n", ""));
}

TEST_CASE("a rule's key in a flow map is replaced, and added before its closing brace", "[unit]") {
  const std::string out =
      Edit({{"weekly", "shift", "limit", "6.5"}, {"weekly", "drift", "persistence", "2"}});
  std::string want = Replace(kText, "signal: cusum, limit: 5,", "signal: cusum, limit: 6.5,");
  want = Replace(want, "limit: 0.8}", "limit: 0.8, persistence: 2}");
  CHECK(out == want);
}

TEST_CASE("a policy written as one flow map takes edits inside its braces", "[unit]") {
  const std::string out = Edit({{"rest", "", "alpha", "0.3"}, {"rest", "", "trend_beta", "0.05"}});
  CHECK(out ==
        Replace(kText, "method: holt, alpha: 0.2}", "method: holt, alpha: 0.3, trend_beta: 0.05}"));
  const std::string removed = Edit({{"rest", "", "alpha", std::nullopt}});
  CHECK(removed == Replace(kText, "method: holt, alpha: 0.2}", "method: holt}"));
}

TEST_CASE("edits that cannot be made are refused naming the policy, rule or key", "[unit]") {
  std::string out = "unchanged", problem;
  CHECK_FALSE(config::EditSettingsText(kText, {{"nightly", "", "alpha", "0.2"}}, out, problem));
  CHECK(problem == "no policy named 'nightly'");
  CHECK_FALSE(config::EditSettingsText(kText, {{"weekly", "bias", "limit", "0.2"}}, out, problem));
  CHECK(problem == "policy 'weekly', rule 'bias': no such rule");
  // The key on the list item's own line cannot be removed without taking the item with it.
  CHECK_FALSE(
      config::EditSettingsText(kText, {{"weekly", "", "name", std::nullopt}}, out, problem));
  CHECK(problem.find("shares its line with the list item") != std::string::npos);
  CHECK(out == "unchanged");
  // Removing a key that is not there changes nothing.
  CHECK(config::EditSettingsText(kText, {{"weekly", "", "damping", std::nullopt}}, out, problem));
  CHECK(out == kText);
}
