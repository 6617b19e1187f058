// Forecasts ahead and their relative variances (monitors/ahead.h). The closed forms checked
// here are Hyndman, Koehler, Ord and Snyder (2008), "Forecasting with Exponential Smoothing",
// Table 6.1 (class 1), by hand for small h; the statsmodels and R comparisons on open data
// sets are in tests/reference/crosscheck.py (cases ahead-statsmodels, ahead-r).
#include <catch2/catch.hpp>
#include <cmath>

#include "monitors/ahead.h"

using monitors::Method;

TEST_CASE("relative forecast variances follow the class 1 closed forms", "[reference]") {
  // REFERENCES.md C49: Hyndman, Koehler, Ord and Snyder (2008), Table 6.1.
  monitors::Constants c;
  c.alpha = 0.3;
  c.beta = 0.2;  // on level differences: the model's beta is 0.3 * 0.2 = 0.06
  c.phi = 0.9;
  c.gamma = 0.1;
  c.season_length = 4;
  const double a = c.alpha, b = c.alpha * c.beta, g = c.gamma, phi = c.phi;
  for (int h = 1; h <= 12; ++h) {
    const double k = std::floor((h - 1) / 4.0);
    // ETS(A,N,N): 1 + alpha^2 (h - 1)
    CHECK(*monitors::RelativeVariance(Method::kSes, c, h) == Approx(1 + a * a * (h - 1)));
    // ETS(A,A,N): 1 + (h - 1)(alpha^2 + alpha beta h + beta^2 h (2h - 1) / 6)
    monitors::Constants undamped = c;
    undamped.phi = 1.0;
    CHECK(*monitors::RelativeVariance(Method::kHolt, undamped, h) ==
          Approx(1 + (h - 1) * (a * a + a * b * h + b * b * h * (2 * h - 1) / 6.0)));
    // ETS(A,Ad,N)
    const double damped =
        1 + a * a * (h - 1) +
        b * phi * h / ((1 - phi) * (1 - phi)) * (2 * a * (1 - phi) + b * phi) -
        b * phi * (1 - std::pow(phi, h)) / ((1 - phi) * (1 - phi) * (1 - phi * phi)) *
            (2 * a * (1 - phi * phi) + b * phi * (1 + 2 * phi - std::pow(phi, h)));
    CHECK(*monitors::RelativeVariance(Method::kDamped, c, h) == Approx(damped));
    // ETS(A,A,A): + gamma k (2 alpha + gamma + beta m (k + 1))
    CHECK(*monitors::RelativeVariance(Method::kSeasonalAdd, undamped, h) ==
          Approx(1 + (h - 1) * (a * a + a * b * h + b * b * h * (2 * h - 1) / 6.0) +
                 g * k * (2 * a + g + b * 4 * (k + 1))));
  }
  // no closed form: a multiplicative season; intermittent demand rates carry none
  CHECK_FALSE(monitors::RelativeVariance(Method::kSeasonalMul, c, 3));
  CHECK_FALSE(monitors::RelativeVariance(Method::kCroston, c, 3));
  CHECK_FALSE(monitors::RelativeVariance(Method::kSba, c, 3));
}

TEST_CASE("forecasts ahead: flat, linear, damped, seasonal and demand rates", "[unit]") {
  monitors::Constants c;
  c.alpha = 0.2;
  c.phi = 0.5;
  c.season_length = 3;
  monitors::ModelState s;
  s.level = 100;
  s.trend = 4;
  s.season = {1, -2, 3};
  using V = std::vector<double>;
  CHECK(monitors::ForecastAhead(Method::kSes, c, s, 7, 3) == V{100, 100, 100});
  monitors::Constants linear = c;
  linear.phi = 1.0;
  CHECK(monitors::ForecastAhead(Method::kHolt, linear, s, 7, 3) == V{104, 108, 112});
  CHECK(monitors::ForecastAhead(Method::kDamped, c, s, 7, 3) == V{102, 103, 103.5});
  // index 7 has phase 1 (7 mod 3), then 2, then 0
  CHECK(monitors::ForecastAhead(Method::kSeasonalAdd, linear, s, 7, 3) == V{102, 111, 113});
  CHECK(monitors::ForecastAhead(Method::kSeasonalMul, linear, s, 7, 1) == V{-208});
  s.has_demand = true;
  s.size = 6;
  s.interval = 3;
  CHECK(monitors::ForecastAhead(Method::kCroston, c, s, 7, 2) == V{2, 2});
  CHECK(monitors::ForecastAhead(Method::kSba, c, s, 7, 1)[0] == Approx(1.8));  // (1 - alpha/2) z/p
  s.has_demand = false;
  CHECK(monitors::ForecastAhead(Method::kCroston, c, s, 7, 2).empty());
}

TEST_CASE("a seed carries what the forecasts ahead need, for horizons past the season", "[unit]") {
  monitors::Constants c;
  c.alpha = 0.3;
  c.beta = 0.2;
  c.phi = 0.9;
  c.gamma = 0.1;
  c.season_length = 4;
  monitors::ModelState s;
  s.level = 50;
  s.trend = -1.5;
  s.season = {2, -3, 5, -4};
  s.has_demand = true;
  s.size = 8;
  s.interval = 2.5;
  for (Method m : {Method::kSes, Method::kHolt, Method::kDamped, Method::kSeasonalAdd,
                   Method::kSeasonalMul, Method::kCroston, Method::kSba}) {
    for (int horizon : {1, 3, 4, 9}) {
      const std::vector<double> want = monitors::ForecastAhead(m, c, s, 6, horizon);
      std::vector<double> terms(static_cast<std::size_t>(horizon)), got(want.size());
      monitors::AheadSeed seed;
      REQUIRE(monitors::SeedAhead(m, c, s, 6, horizon, seed, terms.data()));
      CHECK(monitors::SeasonTermsAhead(m, c, horizon) ==
            (monitors::IsSeasonal(m) ? std::min(horizon, 4) : 0));
      monitors::ForecastFromSeed(m, c, seed, terms.data(), horizon, got.data());
      CHECK(got == want);
      std::vector<double> all(static_cast<std::size_t>(horizon));
      const bool has = monitors::RelativeVariances(m, c, horizon, all.data());
      for (int h = 1; h <= horizon; ++h) {
        const std::optional<double> one = monitors::RelativeVariance(m, c, h);
        REQUIRE(has == one.has_value());
        if (has) CHECK(all[static_cast<std::size_t>(h - 1)] == *one);
      }
    }
  }
}
