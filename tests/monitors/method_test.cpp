#include "monitors/method.h"

#include <catch2/catch.hpp>
#include <cmath>

#include "monitors/start.h"
#include "tests/monitors/reference_data.h"

using monitors::Constants;
using monitors::Method;
using monitors::ModelState;

namespace {

// Runs `method` from `start` over y; returns the one-step forecasts F(1..n) and leaves the
// state after the last period in `s`.
std::vector<double> Run(Method method, const Constants& c, ModelState& s,
                        const std::vector<double>& y) {
  std::vector<double> f;
  for (std::size_t t = 0; t < y.size(); ++t) {
    auto fc = monitors::ForecastNext(method, c, s, static_cast<long>(t));
    f.push_back(fc ? *fc : NAN);
    monitors::UpdateModel(method, c, s, static_cast<long>(t), y[t]);
  }
  return f;
}

double Sse(const std::vector<double>& y, const std::vector<double>& f, std::size_t from = 0) {
  double sse = 0;
  for (std::size_t t = from; t < y.size(); ++t) sse += (y[t] - f[t]) * (y[t] - f[t]);
  return sse;
}

// h-step forecasts after the data: coast h-1 periods, then the one-step forecast.
double Ahead(Method method, const Constants& c, ModelState s, long n, int h) {
  for (int k = 1; k < h; ++k) monitors::CoastModel(method, c, s);
  return *monitors::ForecastNext(method, c, s, n + h - 1);
}

}  // namespace

TEST_CASE("ses on the NIST handbook data reproduces the smoothed values", "[reference]") {
  // REFERENCES.md C1-C4: NIST e-Handbook 6.4.3.1 data, alpha 0.1, S2 = y1 (recomputed in
  // R HoltWinters and statsmodels).
  Constants c;
  c.alpha = 0.1;
  ModelState s;
  s.level = testdata::kNist[0];
  std::vector<double> rest(testdata::kNist.begin() + 1, testdata::kNist.end());
  ModelState s2 = s;
  auto f = Run(Method::kSes, c, s2, rest);  // f[k] = S(k+2)
  const double expected[] = {70.9,      70.71,      70.439,      69.7951,     69.31559,
                             69.584031, 70.4256279, 70.88306511, 71.29475860, 71.66528274};
  for (int k = 0; k < 10; ++k) CHECK(f[k + 1] == Approx(expected[k]).margin(1e-6));
  CHECK(s2.level == Approx(71.49875447).margin(1e-6));        // #2 forecast t = 13
  CHECK(Sse(rest, f) == Approx(208.8184097).margin(1e-6));    // #3
  CHECK(Sse(rest, f) / 11 == Approx(18.98349).margin(1e-5));  // #4
  CHECK(f[10] == Approx(71.7).margin(0.05));                  // #5 NIST-432 text
}

TEST_CASE("ses with alpha 0.5 on the NIST data gives the recomputed SSE", "[reference]") {
  // REFERENCES.md C7 (R 4.2.2 HoltWinters, alpha 0.5).
  Constants c;
  c.alpha = 0.5;
  ModelState s;
  s.level = 71;
  std::vector<double> rest(testdata::kNist.begin() + 1, testdata::kNist.end());
  auto f = Run(Method::kSes, c, s, rest);
  CHECK(Sse(rest, f) == Approx(181.4617662).margin(1e-6));
  CHECK(s.level == Approx(72.40185547).margin(1e-6));
}

TEST_CASE("ses on fpp1 oil matches statsmodels' shipped results", "[reference]") {
  // REFERENCES.md C10, C11: statsmodels 0.13.5 test_holtwinters.py (l0 = y1).
  for (auto [alpha, forecast, sse] : {std::tuple{0.2, 484.802468, 12391.7471752299},
                                      std::tuple{0.6, 501.837461, 8098.55488019406}}) {
    Constants c;
    c.alpha = alpha;
    ModelState s;
    s.level = testdata::kOilFpp1[0];
    auto f = Run(Method::kSes, c, s, testdata::kOilFpp1);
    CHECK(s.level == Approx(forecast).margin(1e-6));
    CHECK(Sse(testdata::kOilFpp1, f) == Approx(sse).margin(1e-6));
  }
}

TEST_CASE("ses on fpp2 oil with the published constants gives the published forecast",
          "[reference]") {
  // REFERENCES.md C12, published: FPP2 sec. 7.1 summary(ses(oildata)).
  Constants c;
  c.alpha = 0.8338901402;
  ModelState s;
  s.level = 446.5867912262;
  auto f = Run(Method::kSes, c, s, testdata::kOilFpp2);
  CHECK(s.level == Approx(542.6806121).margin(1e-4));
  CHECK(Sse(testdata::kOilFpp2, f) == Approx(14235.5875).margin(1e-3));
  CHECK(f[1] == Approx(445.5672).margin(5e-5));  // published fitted value 1997
}

TEST_CASE("ses weights decay geometrically", "[reference]") {
  // REFERENCES.md C14, by hand (exact): feeding a unit impulse k periods ago gives weight
  // alpha(1-alpha)^k.
  const double expected[] = {0.2, 0.16, 0.128, 0.1024, 0.08192, 0.065536};
  for (int k = 0; k < 6; ++k) {
    Constants c;
    c.alpha = 0.2;
    ModelState s;
    std::vector<double> y(static_cast<std::size_t>(k + 1), 0.0);
    y[0] = 1.0;
    Run(Method::kSes, c, s, y);
    CHECK(s.level == Approx(expected[k]).margin(1e-12));
  }
}

TEST_CASE("alpha 1 gives the naive forecast and alpha 0 a constant", "[property]") {
  // REFERENCES.md C15, by hand.
  Constants one, zero;
  one.alpha = 1.0;
  zero.alpha = 0.0;
  ModelState a, b;
  a.level = b.level = 50;
  auto fa = Run(Method::kSes, one, a, testdata::kNist);
  auto fb = Run(Method::kSes, zero, b, testdata::kNist);
  for (std::size_t t = 1; t < testdata::kNist.size(); ++t) {
    CHECK(fa[t] == testdata::kNist[t - 1]);
    CHECK(fb[t] == 50.0);
  }
}

TEST_CASE("holt on fpp1 air passengers matches the R fpp value", "[reference]") {
  // REFERENCES.md C41: statsmodels 0.13.5 test_holtwinters.py with the R fpp SSE
  // 72.7894551374757 and forecasts 43.76, 45.59, 47.43, 49.27, 51.10.
  Constants c;
  c.alpha = 0.8;
  c.beta = 0.2;
  ModelState s;
  s.level = 17.5534;
  s.trend = 4.3067;
  auto f = Run(Method::kHolt, c, s, testdata::kAirFpp1);
  CHECK(f[0] == Approx(21.8601).margin(1e-9));
  CHECK(f[1] == Approx(22.032368).margin(1e-6));
  CHECK(f[2] == Approx(25.48461872).margin(1e-8));
  CHECK(Sse(testdata::kAirFpp1, f) == Approx(72.7894551375).margin(1e-6));
  const double published[] = {43.76, 45.59, 47.43, 49.27, 51.10};
  const double recomputed[] = {43.7570, 45.5935, 47.4301, 49.2666, 51.1032};
  for (int h = 1; h <= 5; ++h) {
    const double v = Ahead(Method::kHolt, c, s, 15, h);
    CHECK(v == Approx(published[h - 1]).margin(5e-3));
    CHECK(v == Approx(recomputed[h - 1]).margin(1e-4));
  }
}

TEST_CASE("additive Holt-Winters with the previous-level seasonal update", "[reference]") {
  // REFERENCES.md C43, by hand, statsmodels ETSModel agrees: aust data (statsmodels
  // test_holtwinters.py), m = 4, alpha .3, beta .1, gamma .2, l0 35, b0 .5, s0 = (7, -10, -3, 6);
  // statsmodels ETSModel agrees.
  Constants c;
  c.alpha = 0.3;
  c.beta = 0.1;
  c.gamma = 0.2;
  c.season_length = 4;
  monitors::StartSpec start;
  start.kind = monitors::StartKind::kExplicit;
  start.level = 35;
  start.trend = 0.5;
  start.season = {7, -10, -3, 6};
  ModelState s = monitors::ExplicitStart(Method::kSeasonalAdd, c, start);
  auto f = Run(Method::kSeasonalAdd, c, s, testdata::kAust);
  CHECK(Sse(testdata::kAust, f) == Approx(182.056552).margin(1e-4));
  const double expected[] = {58.0030, 37.6283, 45.7791, 50.9465};
  for (int h = 1; h <= 4; ++h)
    CHECK(Ahead(Method::kSeasonalAdd, c, s, 24, h) == Approx(expected[h - 1]).margin(1e-4));
}

TEST_CASE("croston and sba follow R forecast's croston on an intermittent series", "[reference]") {
  // REFERENCES.md C47 (R forecast 8.20 croston, alpha 0.1) and C48 (SBA factor 1 - alpha/2,
  // Syntetos & Boylan 2005).
  const std::vector<double> y = {0, 0, 5, 0, 0, 0, 3, 0, 7, 0, 0, 0, 0, 4, 0};
  Constants c;
  c.alpha = 0.1;
  ModelState s;
  auto f = Run(Method::kCroston, c, s, y);
  CHECK(std::isnan(f[0]));
  CHECK(std::isnan(f[2]));           // no forecast before the first demand
  CHECK(f[3] == Approx(5.0 / 3.0));  // first size 5, first interval 3 (counted from time 0)
  CHECK(s.size == Approx(4.918).margin(1e-12));
  CHECK(s.interval == Approx(3.191).margin(1e-12));
  CHECK(*monitors::ForecastNext(Method::kCroston, c, s, 15) == Approx(1.541209652).margin(1e-8));
  CHECK(*monitors::ForecastNext(Method::kSba, c, s, 15) == Approx(1.464149169).margin(1e-8));
}

TEST_CASE("damped trend with phi 1 equals holt and damps the trend otherwise", "[property]") {
  Constants c;
  c.alpha = 0.5;
  c.beta = 0.3;
  ModelState a, b;
  a.level = b.level = 20;
  a.trend = b.trend = 2;
  auto fa = Run(Method::kHolt, c, a, testdata::kAirFpp1);
  auto fb = Run(Method::kDamped, c, b, testdata::kAirFpp1);
  CHECK(fa == fb);
  c.phi = 0.9;
  ModelState d;
  d.level = 10;
  d.trend = 1;
  CHECK(*monitors::ForecastNext(Method::kDamped, c, d, 0) == Approx(10.9));
  // h-step forecast l + (phi + ... + phi^h) b (REFERENCES.md F7; FPP3 8.2)
  CHECK(Ahead(Method::kDamped, c, d, 0, 3) == Approx(10 + 0.9 + 0.81 + 0.729));
}
