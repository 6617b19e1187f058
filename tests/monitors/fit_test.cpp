#include "monitors/fit.h"

#include <catch2/catch.hpp>

#include "tests/monitors/reference_data.h"

using monitors::Constants;
using monitors::FitStart;
using monitors::Method;

TEST_CASE("fitted ses on fpp2 oil finds R's optimum", "[reference]") {
  // REFERENCES.md C16: published, FPP2 sec. 7.1 ses(oildata): alpha 0.8339, l0 446.5868, forecast
  // 542.6806, SSE 14235.5875 (R forecast 8.20, ets ANN, opt.crit "mse").
  auto fit = FitStart(Method::kSes, Constants{}, testdata::kOilFpp2);
  CHECK(fit.constants.alpha == Approx(0.8338901).margin(1e-3));
  CHECK(fit.start.level == Approx(446.5868).margin(0.05));
  CHECK(fit.sse == Approx(14235.5875).margin(0.01));
  monitors::ModelState s = fit.start;
  for (std::size_t t = 0; t < testdata::kOilFpp2.size(); ++t)
    monitors::UpdateModel(Method::kSes, fit.constants, s, static_cast<long>(t),
                          testdata::kOilFpp2[t]);
  CHECK(s.level == Approx(542.6806).margin(0.01));
}

TEST_CASE("fitted ses on fpp1 oil agrees with R and statsmodels", "[reference]") {
  // REFERENCES.md C20, statsmodels 0.13.5 test_holtwinters.py (oil 1996-2007): R alpha 0.891956, l0
  // 447.4836; statsmodels 0.891998, 447.4784.
  auto fit = FitStart(Method::kSes, Constants{}, testdata::kOilFpp1);
  CHECK(fit.constants.alpha == Approx(0.891956).margin(1e-3));
  CHECK(fit.start.level == Approx(447.4836).margin(0.05));
  CHECK(fit.sse / 12 == Approx(631.118371).epsilon(1e-6));  // R mse
}

TEST_CASE("fitted ses on the NIST data runs to the alpha = 1 boundary", "[reference]") {
  // REFERENCES.md C8, R 4.2.2 HoltWinters on the NIST 6.4.3.1 data: SSE-optimal alpha ~1.0 (R
  // 0.99993), SSE ~139.0 with S2 = y1. With a free start level the first error vanishes too, so the
  // SSE is the same 139.0.
  auto fit = FitStart(Method::kSes, Constants{}, testdata::kNist);
  CHECK(fit.constants.alpha == Approx(1.0).margin(1e-3));
  CHECK(fit.sse == Approx(139.0).margin(0.01));
}

TEST_CASE("fitting never does worse than the grid and respects the bounds", "[unit]") {
  Constants base;
  base.season_length = 4;
  auto fit = FitStart(Method::kSeasonalAdd, base, testdata::kAust);
  CHECK(fit.constants.alpha >= 1e-4);
  CHECK(fit.constants.alpha <= 0.9999);
  CHECK(fit.constants.gamma <= 0.9999);
  // the SSE reported is the SSE of the returned constants and start
  CHECK(monitors::WindowSse(Method::kSeasonalAdd, fit.constants, fit.start, testdata::kAust) ==
        Approx(fit.sse));
  double season_sum = 0;
  for (double v : fit.start.season) season_sum += v;
  CHECK(season_sum == Approx(0.0).margin(1e-9));
  // beats the hand-picked constants of the Holt-Winters reference check (SSE 182.06)
  CHECK(fit.sse < 182.056552);
}
