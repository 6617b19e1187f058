#include "monitors/diagnosis.h"

#include <catch2/catch.hpp>
#include <cmath>

using monitors::ChangeKind;
using monitors::Diagnose;

namespace {

const double kNone = std::nan("");

}  // namespace

TEST_CASE("a step's start, level and interval, by hand", "[reference]") {
  // ses alpha 0.1 forecasts 10 until a step to 15 in period 5 (0-based), then 10.5, 10.95.
  // The start statistic (sum of y_i - f_k for i >= k)^2 / (n - k), by hand: k = 4: 15^2/4 =
  // 56.25; k = 5: 15^2/3 = 75; k = 6: 9^2/2 = 40.5; k = 7: 4.05^2 = 16.4. So k = 5, two periods
  // before the newest. Level 15; interval +/- 1.959964 x 1.2533141 x 1 / sqrt(3) = 1.418224.
  const std::vector<double> y{10, 10, 10, 10, 10, 15, 15, 15};
  const std::vector<double> f{10, 10, 10, 10, 10, 10, 10.5, 10.95};
  const std::vector<double> mad(8, 1.0);
  const monitors::Diagnosis d = Diagnose(y, f, mad, false, 0.95);
  REQUIRE(d.ok);
  CHECK(d.began == 2);
  CHECK(d.kind == ChangeKind::kStepUp);
  CHECK(d.level == Approx(15.0));
  CHECK(d.before == 10.0);
  CHECK(d.upper - d.level == Approx(1.418224).epsilon(1e-5));
  CHECK(d.level - d.lower == Approx(1.418224).epsilon(1e-5));
  CHECK(d.action == monitors::SuggestedAction::kRelevel);
  CHECK(d.advice == "re-level to 15");
  // A change cannot begin after the alert it set off: with the alert opened at index 4 the
  // start is looked for up to there (k = 4 by the statistic above).
  CHECK(Diagnose(y, f, mad, false, 0.95, 4).began == 3);
}

TEST_CASE("a one-off spike is told from a step once later periods come back", "[reference]") {
  // By hand: k = 4 gives 20^2 / 4 = 100, k = 5 (f = 12) gives 6^2 / 3 = 12, k = 0 gives
  // 20^2 / 8 = 50: the start is the spike; the first deviation 20 is beyond 3 sigma (3.76) and
  // the rest average 0: a spike; the level it leaves is the level before, 10.
  const std::vector<double> y{10, 10, 10, 10, 30, 10, 10, 10};
  const std::vector<double> f{10, 10, 10, 10, 10, 12, 11.8, 11.62};
  const std::vector<double> mad(8, 1.0);
  monitors::Diagnosis d = Diagnose(y, f, mad, false, 0.95);
  REQUIRE(d.ok);
  CHECK(d.began == 3);
  CHECK(d.kind == ChangeKind::kSpike);
  CHECK(d.level == Approx(10.0));
  CHECK(d.advice == "nothing: a one-off");
  // On the spike's own period it is a spike "so far".
  d = Diagnose({10, 10, 10, 10, 30}, {10, 10, 10, 10, 10}, {1, 1, 1, 1, 1}, false, 0.95);
  CHECK(d.kind == ChangeKind::kSpike);
  CHECK(d.began == 0);
  CHECK(d.advice == "nothing yet: a one-off unless the next periods stay near 30");
}

TEST_CASE("a trend is named with the level its line reaches now", "[reference]") {
  // y rises by 1 a period from index 4 against a flat forecast of 10. By hand the statistic is
  // largest at k = 6 ((3+4+5+6)^2 / 4 = 81 against 80 at k = 5 and 75 at k = 7): deviations
  // 3, 4, 5, 6 lie on a line of slope 1 (t unbounded), which moves 3 > 2 sigma (1.25) over the
  // four periods: a trend up, its level the line's newest value 16.
  const std::vector<double> y{10, 10, 10, 10, 11, 12, 13, 14, 15, 16};
  const std::vector<double> f(10, 10.0);
  const std::vector<double> mad(10, 0.5);
  const monitors::Diagnosis d = Diagnose(y, f, mad, false, 0.95);
  REQUIRE(d.ok);
  CHECK(d.began == 3);
  CHECK(d.kind == ChangeKind::kTrendUp);
  CHECK(d.level == Approx(16.0));
  CHECK(d.action == monitors::SuggestedAction::kRaiseAlpha);
}

TEST_CASE("intermittent demand whose periods with demand thin out is a changed pattern",
          "[reference]") {
  // Demand in 5 of the first 7 periods, then in 1 of 7; forecasts near 2. By hand the start is
  // k = 7 (sum -13: 169 / 7 = 24.1, larger than any other k), shares 71 % before and 14 % since.
  const std::vector<double> y{3, 0, 2, 4, 0, 3, 2, 0, 0, 0, 0, 0, 1, 0};
  const std::vector<double> f(14, 2.0);
  const std::vector<double> mad(14, 1.0);
  const monitors::Diagnosis d = Diagnose(y, f, mad, true, 0.95);
  REQUIRE(d.ok);
  CHECK(d.began == 6);
  CHECK(d.kind == ChangeKind::kPattern);
  CHECK(d.advice ==
        "review: the demand pattern changed (periods with demand 71 % before, 14 % since)");
  // The same numbers under a method that is not intermittent: a step down.
  CHECK(Diagnose(y, f, mad, false, 0.95).kind == ChangeKind::kStepDown);
}

TEST_CASE("too few periods with a forecast give no diagnosis", "[unit]") {
  CHECK_FALSE(Diagnose({}, {}, {}, false, 0.95).ok);
  CHECK_FALSE(Diagnose({5}, {4}, {1}, false, 0.95).ok);
  CHECK_FALSE(Diagnose({5, 6, 7}, {kNone, kNone, 4}, {0, 0, 1}, false, 0.95).ok);
  monitors::RecentPeriods ring(3);
  for (int i = 0; i < 5; ++i) ring.Push(i, 10.0 + i, 9.0 + i, 1.0);
  std::vector<monitors::PeriodOrdinal> p;
  std::vector<double> a, f, m;
  ring.Copy(p, a, f, m);
  CHECK(p == std::vector<monitors::PeriodOrdinal>{2, 3, 4});
  CHECK(a == std::vector<double>{12, 13, 14});
}
