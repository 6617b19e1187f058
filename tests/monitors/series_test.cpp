#include "monitors/series.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <random>

#include "monitors/interval.h"
#include "tests/monitors/reference_data.h"

using monitors::PolicySpec;
using monitors::SeriesState;
using monitors::StepResult;
using monitors::StepStatus;

namespace {

std::vector<StepResult> Feed(const PolicySpec& p, SeriesState& s, const std::vector<double>& y,
                             monitors::PeriodOrdinal first = 100) {
  std::vector<StepResult> out;
  for (std::size_t t = 0; t < y.size(); ++t) {
    StepResult r;
    REQUIRE(monitors::Step(p, s, first + static_cast<long>(t), y[t], r) == StepStatus::kOk);
    out.push_back(r);
  }
  return out;
}

PolicySpec StepTestPolicy(bool lagged, double floor, double cap) {
  // REFERENCES.md C38-C40 step test, by hand: 10 (t = 1..10) then 20 (t = 11..16); F(1) = 10, beta
  // 0.2, E0 = 0, M0 = 1.
  PolicySpec p;
  p.start.kind = monitors::StartKind::kExplicit;
  p.start.level = 10;
  p.constants.alpha = 0.0;
  p.signal_beta = 0.2;
  p.initial_mad = 1.0;
  p.adaptive = {true, floor, cap, lagged};
  return p;
}

const std::vector<double> kStep = {10, 10, 10, 10, 10, 10, 10, 10, 10, 10, 20, 20, 20, 20, 20, 20};

}  // namespace

TEST_CASE("Trigg-Leach immediate adaptive alpha on a step", "[reference]") {
  // REFERENCES.md C38, by hand (Trigg-Leach 1967, immediate).
  PolicySpec p = StepTestPolicy(false, 0.0, 1.0);
  SeriesState s = monitors::NewSeriesState(p);
  auto r = Feed(p, s, kStep);
  const double alpha[] = {0, 0.9588, 0.9608, 0.9608, 0.9609, 0.9609, 0.9609};
  const double next[] = {10, 19.5882, 19.9838, 19.9994, 20.0000, 20.0000, 20.0000};
  for (int k = 0; k < 7; ++k) {
    CHECK(r[9 + k].alpha == Approx(alpha[k]).margin(1e-4));
    const double f_next =
        k < 6 ? r[10 + k].forecast
              : *monitors::ForecastNext(p.method, monitors::EffectiveConstants(p, s), s.model, 16);
    CHECK(f_next == Approx(next[k]).margin(1e-4));
  }
  CHECK(r[10].alpha == Approx(0.958819).margin(1e-6));
}

TEST_CASE("Trigg-Leach lagged adaptive alpha on a step", "[reference]") {
  // REFERENCES.md C39, by hand; the one-period lag attributed to Shone (1967) (from memory).
  PolicySpec p = StepTestPolicy(true, 0.0, 1.0);
  SeriesState s = monitors::NewSeriesState(p);
  auto r = Feed(p, s, kStep);
  const double alpha[] = {0, 0, 0.9588, 0.9813, 0.9818, 0.9818, 0.9818};
  const double next[] = {10, 10, 19.5882, 19.9923, 19.9999, 20.0000, 20.0000};
  for (int k = 0; k < 7; ++k) {
    CHECK(r[9 + k].alpha == Approx(alpha[k]).margin(1e-4));
    const double f_next =
        k < 6 ? r[10 + k].forecast
              : *monitors::ForecastNext(p.method, monitors::EffectiveConstants(p, s), s.model, 16);
    CHECK(f_next == Approx(next[k]).margin(1e-4));
  }
}

TEST_CASE("Trigg-Leach alpha clamped to a floor and a cap", "[reference]") {
  // REFERENCES.md C40, by hand: immediate, alpha within [0.05, 0.5].
  PolicySpec p = StepTestPolicy(false, 0.05, 0.5);
  SeriesState s = monitors::NewSeriesState(p);
  auto r = Feed(p, s, kStep);
  CHECK(r[9].alpha == 0.05);
  for (int k = 10; k < 16; ++k) CHECK(r[k].alpha == 0.5);
  const double next[] = {15, 17.5, 18.75, 19.375, 19.6875};
  for (int k = 0; k < 5; ++k) CHECK(r[11 + k].forecast == Approx(next[k]).margin(1e-9));
  CHECK(*monitors::ForecastNext(p.method, monitors::EffectiveConstants(p, s), s.model, 16) ==
        Approx(19.84375).margin(1e-9));
}

TEST_CASE("first-actual: period 1 has no forecast and period 2's forecast is actual 1", "[unit]") {
  PolicySpec p;
  p.constants.alpha = 0.1;
  SeriesState s = monitors::NewSeriesState(p);
  auto r = Feed(p, s, testdata::kNist);
  CHECK_FALSE(r[0].has_forecast);
  CHECK(r[0].stats.mad == 0.0);
  CHECK(r[1].has_forecast);
  CHECK(r[1].forecast == 71.0);
  CHECK(r[11].forecast == Approx(71.66528274).margin(1e-6));
  // E, M, C are 0 before the first forecast, then ordinary EWMAs (no bias correction).
  CHECK(r[1].stats.smoothed_error == Approx(0.1 * -1.0));
  CHECK(r[1].stats.mad == Approx(0.1));
  CHECK(r[1].stats.cusum == -1.0);
  CHECK(r[1].trigg.value() == Approx(-1.0));
  CHECK_FALSE(r[1].lower);  // no spread estimate before the first error
  // interval from the MAD before this period's update
  const double hw = monitors::IntervalHalfWidth(0.95, r[1].stats.mad);
  CHECK(*r[2].lower == Approx(r[2].forecast - hw));
  CHECK(*r[2].upper == Approx(r[2].forecast + hw));
}

TEST_CASE("mean_of_first: the window starts the level and has no forecasts", "[unit]") {
  PolicySpec p;
  p.start.kind = monitors::StartKind::kMeanOfFirst;
  p.start.count = 4;
  SeriesState s = monitors::NewSeriesState(p);
  auto r = Feed(p, s, {10, 12, 14, 16, 20});
  for (int k = 0; k < 4; ++k) CHECK_FALSE(r[k].has_forecast);
  CHECK(r[4].forecast == 13.0);
}

TEST_CASE("mean_of_first for holt fits a line through the window", "[unit]") {
  PolicySpec p;
  p.method = monitors::Method::kHolt;
  p.start.kind = monitors::StartKind::kMeanOfFirst;
  p.start.count = 4;
  SeriesState s = monitors::NewSeriesState(p);
  auto r = Feed(p, s, {10, 12, 14, 16, 18});
  CHECK(r[4].forecast == Approx(18.0));  // level 16 at the window's end + trend 2
  CHECK(r[4].error == Approx(0.0).margin(1e-12));
}

TEST_CASE("mean_of_first for seasonal-add recovers an exact seasonal pattern", "[unit]") {
  PolicySpec p;
  p.method = monitors::Method::kSeasonalAdd;
  p.constants.season_length = 4;
  p.start.kind = monitors::StartKind::kMeanOfFirst;
  p.start.count = 8;
  std::vector<double> y;
  const double season[] = {5, -3, 1, -3};
  for (int t = 0; t < 12; ++t) y.push_back(100 + 2 * t + season[t % 4]);
  SeriesState s = monitors::NewSeriesState(p);
  auto r = Feed(p, s, y);
  for (int t = 8; t < 12; ++t) CHECK(r[t].forecast == Approx(y[t]).margin(1e-9));
}

TEST_CASE("warm-up periods have forecasts but no signals and no alerts", "[unit]") {
  PolicySpec p;
  p.warmup = 3;
  monitors::RuleSpec rule;
  rule.name = "any";
  rule.signal = monitors::SignalKind::kTrigg;
  rule.limit = rule.clear = 0.01;
  p.rules = {rule};
  SeriesState s = monitors::NewSeriesState(p);
  auto r = Feed(p, s, {10, 20, 30, 40, 50});
  for (int k = 1; k <= 3; ++k) {
    CHECK(r[k].has_forecast);
    CHECK_FALSE(r[k].trigg);
    CHECK(r[k].active == 0);
  }
  CHECK(r[4].trigg);
  CHECK(r[4].active == 1);
  CHECK(r[4].opened == 1);
}

TEST_CASE("gap rule zero fills missing periods with zero demand", "[unit]") {
  PolicySpec p;
  p.constants.alpha = 0.5;
  SeriesState s = monitors::NewSeriesState(p);
  StepResult r;
  REQUIRE(monitors::Step(p, s, 10, 100, r) == StepStatus::kOk);
  REQUIRE(monitors::Step(p, s, 13, 100, r) == StepStatus::kOk);
  CHECK(r.filled == 2);
  CHECK(r.forecast == 25.0);  // 100 -> 50 -> 25 after two zero periods
  CHECK(s.next_index == 4);
}

TEST_CASE("gap rule skip carries the forecast over missing periods", "[unit]") {
  PolicySpec p;
  p.constants.alpha = 0.5;
  p.gaps = monitors::GapRule::kSkip;
  SeriesState s = monitors::NewSeriesState(p);
  StepResult r;
  REQUIRE(monitors::Step(p, s, 10, 100, r) == StepStatus::kOk);
  REQUIRE(monitors::Step(p, s, 13, 60, r) == StepStatus::kOk);
  CHECK(r.forecast == 100.0);
  CHECK(s.missing == 2);
}

TEST_CASE("bad steps are refused and leave the state untouched", "[unit]") {
  PolicySpec p;
  p.max_gap = 5;
  SeriesState s = monitors::NewSeriesState(p);
  StepResult r;
  std::string why;
  REQUIRE(monitors::Step(p, s, 10, 1, r) == StepStatus::kOk);
  CHECK(monitors::Step(p, s, 10, 2, r, &why) == StepStatus::kNotLater);
  CHECK(monitors::Step(p, s, 9, 2, r, &why) == StepStatus::kNotLater);
  CHECK(monitors::Step(p, s, 17, 2, r, &why) == StepStatus::kGapTooLong);
  CHECK(why == "6 periods are missing before this one; max_gap is 5");
  CHECK(monitors::Step(p, s, 11, NAN, r, &why) == StepStatus::kBadValue);
  CHECK(monitors::Step(p, s, 11, INFINITY, r, &why) == StepStatus::kBadValue);
  CHECK(s.last_period == 10);
  CHECK(s.next_index == 1);
  p.method = monitors::Method::kCroston;
  CHECK(monitors::Step(p, s, 11, -1, r, &why) == StepStatus::kBadValue);
}

TEST_CASE("croston reports no forecast and no statistics before the first demand", "[unit]") {
  PolicySpec p;
  p.method = monitors::Method::kSba;
  p.constants.alpha = 0.1;
  SeriesState s = monitors::NewSeriesState(p);
  auto r = Feed(p, s, {0, 0, 5, 0, 0, 0, 3});
  CHECK_FALSE(r[2].has_forecast);
  CHECK(r[2].stats.mad == 0.0);
  CHECK(r[3].has_forecast);
  CHECK(r[3].forecast == Approx(0.95 * 5.0 / 3.0));
}

TEST_CASE("through Step, the cumulative error of fixed-alpha ses is (F(n+1) - F(2)) / alpha",
          "[property]") {
  // REFERENCES.md F2 identity, by hand; random data, first-actual start.
  std::mt19937_64 gen(2024);
  std::uniform_real_distribution<double> u(0, 500);
  for (double alpha : {0.05, 0.3, 0.9}) {
    PolicySpec p;
    p.constants.alpha = alpha;
    SeriesState s = monitors::NewSeriesState(p);
    std::vector<double> y(300);
    for (double& v : y) v = u(gen);
    auto r = Feed(p, s, y);
    const double f_next =
        *monitors::ForecastNext(p.method, monitors::EffectiveConstants(p, s), s.model, 300);
    CHECK(r.back().stats.cusum == Approx((f_next - r[1].forecast) / alpha).epsilon(1e-9));
  }
}

namespace {
monitors::PolicySpec RulePolicy(monitors::RuleSpec rule) {
  monitors::PolicySpec p;
  p.method = monitors::Method::kSes;
  p.constants.alpha = 0.2;
  p.start.kind = monitors::StartKind::kExplicit;
  p.start.level = 10;
  p.initial_mad = 1;
  p.rules = {std::move(rule)};
  return p;
}
}  // namespace

TEST_CASE("bias rule: mean error over the window as a share of mean demand", "[unit]") {
  // Hand computation: explicit level 10, alpha 0.2, actuals 12, 12, 12.
  // F = 10, 10.4, 10.72; e = 2, 1.6, 1.28; sum e = 4.88 over sum A = 36 -> 0.13556.
  monitors::RuleSpec bias;
  bias.name = "bias";
  bias.signal = monitors::SignalKind::kBias;
  bias.periods = 3;
  bias.limit = bias.clear = 0.13;
  bias.direction = monitors::Direction::kUnder;
  const monitors::PolicySpec p = RulePolicy(bias);
  monitors::SeriesState s = monitors::NewSeriesState(p);
  monitors::StepResult r;
  REQUIRE(monitors::Step(p, s, 1, 12, r) == monitors::StepStatus::kOk);
  CHECK_FALSE(monitors::RuleValue(bias, r, s).has_value());  // window not full
  REQUIRE(monitors::Step(p, s, 2, 12, r) == monitors::StepStatus::kOk);
  CHECK(r.episodes_opened == 0);
  REQUIRE(monitors::Step(p, s, 3, 12, r) == monitors::StepStatus::kOk);
  REQUIRE(monitors::RuleValue(bias, r, s).has_value());
  CHECK(*monitors::RuleValue(bias, r, s) == Approx(4.88 / 36).epsilon(1e-6));
  CHECK(r.episodes_opened == 1);
  // accuracy over the same window: sum |e| / sum A, the same here
  monitors::RuleSpec acc = bias;
  acc.signal = monitors::SignalKind::kAccuracy;
  CHECK(*monitors::RuleValue(acc, r, s) == Approx(4.88 / 36).epsilon(1e-6));
  // the window keeps only the newest three: an actual on forecast (F4 = 10.976) drops e1 = 2
  REQUIRE(monitors::Step(p, s, 4, 10.976, r) == monitors::StepStatus::kOk);
  CHECK(*monitors::RuleValue(bias, r, s) == Approx(2.88 / 34.976).epsilon(1e-5));
}

TEST_CASE("alpha_at_cap holds after the adaptive constant stays at its cap", "[unit]") {
  monitors::RuleSpec pinned;
  pinned.name = "pinned";
  pinned.signal = monitors::SignalKind::kAlphaAtCap;
  pinned.limit = pinned.clear = 0.5;
  pinned.persistence = 3;
  monitors::PolicySpec p = RulePolicy(pinned);
  p.adaptive.enabled = true;
  p.adaptive.lagged = false;
  p.adaptive.floor = 0.05;
  p.adaptive.cap = 0.5;
  p.signal_beta = 0.2;
  monitors::SeriesState s = monitors::NewSeriesState(p);
  monitors::StepResult r;
  // a step from 10 to 20 drives |E/M| towards 1, so alpha sits at the 0.5 cap (REFERENCES.md C40)
  long t = 1;
  std::uint64_t opened_at = 0;
  for (; t <= 10; ++t) REQUIRE(monitors::Step(p, s, t, 10, r) == monitors::StepStatus::kOk);
  for (; t <= 16 && !opened_at; ++t) {
    REQUIRE(monitors::Step(p, s, t, 20, r) == monitors::StepStatus::kOk);
    if (r.episodes_opened) opened_at = static_cast<std::uint64_t>(t);
  }
  CHECK(opened_at == 13);  // at the cap from t = 11: the third period is t = 13
}

TEST_CASE("stale rule: an actual after a long gap reports one episode, opened and ended",
          "[unit]") {
  monitors::RuleSpec stale;
  stale.name = "stale";
  stale.signal = monitors::SignalKind::kStale;
  stale.limit = stale.clear = 2.5;  // three periods past due
  monitors::PolicySpec p = RulePolicy(stale);
  p.gaps = monitors::GapRule::kSkip;
  monitors::SeriesState s = monitors::NewSeriesState(p);
  monitors::StepResult r;
  REQUIRE(monitors::Step(p, s, 1, 10, r) == monitors::StepStatus::kOk);
  REQUIRE(monitors::Step(p, s, 4, 10, r) == monitors::StepStatus::kOk);  // two missing
  CHECK(r.episodes_opened == 0);
  REQUIRE(monitors::Step(p, s, 8, 10, r) == monitors::StepStatus::kOk);  // three missing
  CHECK(r.episodes_opened == 1);
  CHECK(r.episodes_resolved == 1);
  // the service's clock opens it while the series is overdue; the arrival ends it
  monitors::StepResult clock;
  monitors::CheckStale(p, s, 3, clock);
  CHECK(clock.episodes_opened == 1);
  REQUIRE(monitors::Step(p, s, 12, 10, r) == monitors::StepStatus::kOk);
  CHECK(r.episodes_opened == 0);
  CHECK(r.episodes_resolved == 1);
}

TEST_CASE("windowed cusum: the newest errors over the MAD from before them", "[unit]") {
  // Hand computation: explicit level 10, alpha 0.2, initial MAD 1, signal_beta 0.1.
  // Actuals 12, 12: F = 10, 10.4; e = 2, 1.6; M before period 1 is 1 -> (2 + 1.6) / 1 = 3.6.
  monitors::RuleSpec w;
  w.name = "shift";
  w.signal = monitors::SignalKind::kCusum;
  w.periods = 2;
  w.limit = w.clear = 3.5;
  const monitors::PolicySpec p = RulePolicy(w);
  monitors::SeriesState s = monitors::NewSeriesState(p);
  monitors::StepResult r;
  REQUIRE(monitors::Step(p, s, 1, 12, r) == monitors::StepStatus::kOk);
  CHECK_FALSE(monitors::RuleValue(w, r, s).has_value());
  REQUIRE(monitors::Step(p, s, 2, 12, r) == monitors::StepStatus::kOk);
  REQUIRE(monitors::RuleValue(w, r, s).has_value());
  CHECK(*monitors::RuleValue(w, r, s) == Approx(3.6).epsilon(1e-6));
  CHECK(r.episodes_opened == 1);
  // next: e3 = 12 - 10.72 = 1.28 over M before period 2 = 0.1 * 2 + 0.9 * 1 = 1.1
  REQUIRE(monitors::Step(p, s, 3, 12, r) == monitors::StepStatus::kOk);
  CHECK(*monitors::RuleValue(w, r, s) == Approx((1.6 + 1.28) / 1.1).epsilon(1e-6));
}
