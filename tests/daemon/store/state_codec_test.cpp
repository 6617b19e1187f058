#include "daemon/store/state_codec.h"

#include <catch2/catch.hpp>
#include <random>

using monitors::PolicySpec;

TEST_CASE("a decoded state continues exactly like the original, for every method", "[unit]") {
  std::mt19937_64 gen(5);
  std::uniform_real_distribution<double> u(0, 50);
  for (auto method : {monitors::Method::kSes, monitors::Method::kHolt, monitors::Method::kDamped,
                      monitors::Method::kSeasonalAdd, monitors::Method::kSeasonalMul,
                      monitors::Method::kCroston, monitors::Method::kSba}) {
    PolicySpec p;
    p.method = method;
    p.constants.season_length = 4;
    p.constants.phi = method == monitors::Method::kDamped ? 0.9 : 1.0;
    if (monitors::IsSeasonal(method)) {
      p.start.kind = monitors::StartKind::kMeanOfFirst;
      p.start.count = 8;
    }
    if (!monitors::IsIntermittent(method)) p.adaptive = {true, 0.05, 0.7, true};
    monitors::RuleSpec rule;
    rule.name = "r";
    rule.limit = rule.clear = 0.3;
    rule.resolve_after = 3;
    monitors::RuleSpec bias = rule;
    bias.signal = monitors::SignalKind::kBias;
    bias.periods = 4;
    bias.limit = bias.clear = 0.1;
    p.rules = {rule, rule, bias};
    monitors::SeriesState a = monitors::NewSeriesState(p);
    monitors::StepResult r;
    for (int t = 0; t < 6; ++t)
      REQUIRE(monitors::Step(p, a, 100 + t, t % 3 ? u(gen) + 1 : 0.5, r) ==
              monitors::StepStatus::kOk);
    const std::string bytes = forewarden::EncodeState(a);
    monitors::SeriesState b;
    REQUIRE(forewarden::DecodeState(bytes, b));
    CHECK(forewarden::EncodeState(b) == bytes);
    for (int t = 6; t < 40; ++t) {
      const double y = t % 5 ? u(gen) + 1 : 0.0;
      monitors::StepResult ra, rb;
      REQUIRE(monitors::Step(p, a, 100 + t, y, ra) == monitors::StepStatus::kOk);
      REQUIRE(monitors::Step(p, b, 100 + t, y, rb) == monitors::StepStatus::kOk);
      REQUIRE(ra.forecast == rb.forecast);
      REQUIRE(ra.stats.mad == rb.stats.mad);
      REQUIRE(ra.active == rb.active);
      REQUIRE(ra.episodes_opened == rb.episodes_opened);
      REQUIRE(ra.episodes_resolved == rb.episodes_resolved);
    }
    CHECK(forewarden::EncodeState(a) == forewarden::EncodeState(b));
  }
}

TEST_CASE("damaged state bytes are refused, not half-read", "[unit]") {
  monitors::SeriesState s;
  s.rules.resize(2);
  const std::string bytes = forewarden::EncodeState(s);
  monitors::SeriesState out;
  out.forecasts = 77;
  CHECK_FALSE(forewarden::DecodeState(bytes.substr(0, bytes.size() - 1), out));
  CHECK_FALSE(forewarden::DecodeState(bytes + "x", out));
  CHECK_FALSE(forewarden::DecodeState("", out));
  std::string wrong_version = bytes;
  wrong_version[0] = 9;
  CHECK_FALSE(forewarden::DecodeState(wrong_version, out));
  CHECK(out.forecasts == 77);
}

TEST_CASE("states written in formats 1 and 2 still decode", "[unit]") {
  monitors::SeriesState s;
  s.seen = true;
  s.last_period = 2920;
  s.stats.mad = 1.5;
  s.rules.resize(1);
  s.rules[0].active = true;
  s.rules[0].open = true;  // formats 1 and 2: a holding rule is an open episode
  // Formats 1 and 2 always carried the constants: decoded, they are the series' own.
  monitors::Constants own;
  own.alpha = s.alpha;
  own.beta = 0.05;
  s.own.set(own);
  const std::string v3 = forewarden::EncodeState(s);
  // Format 2: no quiet count after the rule's run and flags, no window at the end.
  std::string v2 = v3.substr(0, v3.size() - 6);  // window capacity (2) and length (4)
  v2.erase(v2.size() - 8 - 1, 1);                // the rule's quiet count before `active` bits
  v2[0] = 2;
  std::string v1 = v2;
  v1[0] = 1;
  v1.insert(2, std::string(8, '\0'));  // format 1 had the first period after the flags
  for (const std::string& old : {v2, v1}) {
    monitors::SeriesState out;
    REQUIRE(forewarden::DecodeState(old, out));
    CHECK(forewarden::EncodeState(out) == v3);
  }
}

TEST_CASE("a series with fitted constants keeps them through encoding", "[unit]") {
  PolicySpec p;
  p.method = monitors::Method::kHolt;
  p.start.kind = monitors::StartKind::kFitted;
  p.start.count = 8;
  monitors::SeriesState a = monitors::NewSeriesState(p);
  monitors::StepResult r;
  const double y[] = {10, 12, 13, 15, 16, 18, 21, 22, 24, 25};
  for (int t = 0; t < 10; ++t)
    REQUIRE(monitors::Step(p, a, 50 + t, y[t], r) == monitors::StepStatus::kOk);
  REQUIRE(a.own.get() != nullptr);  // the fit chose them
  monitors::SeriesState b;
  REQUIRE(forewarden::DecodeState(forewarden::EncodeState(a), b));
  REQUIRE(b.own.get() != nullptr);
  CHECK(b.own.get()->beta == a.own.get()->beta);
  CHECK(b.alpha == a.alpha);
  monitors::StepResult ra, rb;
  REQUIRE(monitors::Step(p, a, 60, 27, ra) == monitors::StepStatus::kOk);
  REQUIRE(monitors::Step(p, b, 60, 27, rb) == monitors::StepStatus::kOk);
  CHECK(ra.forecast == rb.forecast);
  // a series of a policy without a fitted start stores no constants of its own
  PolicySpec plain;
  monitors::SeriesState c = monitors::NewSeriesState(plain);
  REQUIRE(monitors::Step(plain, c, 1, 5, r) == monitors::StepStatus::kOk);
  monitors::SeriesState d;
  REQUIRE(forewarden::DecodeState(forewarden::EncodeState(c), d));
  CHECK(d.own.get() == nullptr);
  CHECK(forewarden::EncodeState(c).size() < forewarden::EncodeState(a).size());
}
