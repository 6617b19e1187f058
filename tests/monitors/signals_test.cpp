#include "monitors/signals.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <random>

#include "monitors/method.h"
#include "tests/monitors/reference_data.h"

using monitors::ErrorStats;

namespace {
// SES alpha 0.1 on the NIST data from F2 = 71: errors e(2..12).
std::vector<double> NistErrors() {
  std::vector<double> e;
  double f = 71;
  for (std::size_t t = 1; t < testdata::kNist.size(); ++t) {
    e.push_back(testdata::kNist[t] - f);
    f += 0.1 * (testdata::kNist[t] - f);
  }
  return e;
}
}  // namespace

TEST_CASE("Trigg's signal and the cusum on the NIST data match the derived check values",
          "[reference]") {
  // REFERENCES.md C27-C30, by hand on the NIST 6.4.3.1 data: beta 0.2, E = e and M = |e| at the
  // first error.
  const auto e = NistErrors();
  ErrorStats s;
  s.smoothed_error = e[0];
  s.mad = std::fabs(e[0]);
  s.cusum = e[0];
  std::vector<double> trigg = {*monitors::TriggSignal(s)}, cusum = {s.cusum},
                      cs = {s.cusum / s.mad};
  for (std::size_t t = 1; t < e.size(); ++t) {
    monitors::UpdateErrorStats(s, 0.2, e[t]);
    trigg.push_back(*monitors::TriggSignal(s));
    cusum.push_back(s.cusum);
    cs.push_back(*monitors::CusumSignal(s));
  }
  const double t_expected[] = {-1, -1, -1, -1, -1, -0.6283, 0.0578, 0.2675, 0.4142, 0.5219, 0.3794};
  const double c_expected[] = {-1,      -2.9,    -5.61,  -12.049, -16.8441, -14.1597,
                               -5.7437, -1.1693, 2.9476, 6.6528,  4.9875};
  for (int k = 0; k < 11; ++k) {
    CHECK(trigg[k] == Approx(t_expected[k]).margin(1e-4));
    CHECK(cusum[k] == Approx(c_expected[k]).margin(1e-4));
  }
  CHECK(s.smoothed_error == Approx(1.3497).margin(1e-4));  // #28
  CHECK(s.mad == Approx(3.5574).margin(1e-4));
  CHECK(cs[4] == Approx(-5.7287).margin(1e-4));  // #30: t = 6
  CHECK(cs[3] == Approx(-4.8651).margin(1e-4));  // crosses -4 at t = 5
}

TEST_CASE("the cumulative error of fixed-alpha ses is the forecast's move over alpha",
          "[property]") {
  // REFERENCES.md F2 identity, C9, by hand: sum of 11 errors = (71.49875447 - 71)/0.1.
  const auto e = NistErrors();
  ErrorStats s;
  for (double v : e) monitors::UpdateErrorStats(s, 0.3, v);
  CHECK(s.cusum == Approx(4.98754465).margin(1e-8));
  CHECK(s.cusum == Approx((71.49875447 - 71) / 0.1).margin(1e-7));
}

TEST_CASE("Trigg's signal stays within [-1, 1] for any errors", "[property]") {
  // REFERENCES.md F2, C31, by hand (|E| <= M when E and M share beta and start at 0).
  std::mt19937_64 gen(42);
  std::uniform_real_distribution<double> u(-1000, 1000), b(0.01, 1.0);
  for (int path = 0; path < 200; ++path) {
    ErrorStats s;
    const double beta = b(gen);
    for (int t = 0; t < 200; ++t) {
      monitors::UpdateErrorStats(s, beta, t % 17 == 0 ? 0.0 : u(gen) * (t % 5 ? 1 : 1e-6));
      auto v = monitors::TriggSignal(s);
      if (v) REQUIRE(std::fabs(*v) <= 1.0 + 1e-12);
      REQUIRE(v.has_value() == (s.mad > 0));
    }
  }
}

TEST_CASE("both signals are undefined while the MAD is zero", "[unit]") {
  ErrorStats s;
  CHECK_FALSE(monitors::TriggSignal(s));
  CHECK_FALSE(monitors::CusumSignal(s));
  monitors::UpdateErrorStats(s, 0.1, 0.0);
  CHECK_FALSE(monitors::TriggSignal(s));
}

TEST_CASE("the steady-state variance of the smoothed error is beta/(2-beta)", "[reference]") {
  // REFERENCES.md F3, C32 (Lucas and Saccucci 1990): Monte Carlo, seeded, 400k draws.
  std::mt19937_64 gen(7);
  std::normal_distribution<double> n01;
  for (auto [beta, expected] : {std::pair{0.1, 0.0526316}, std::pair{0.2, 0.1111111}}) {
    double sum2 = 0;
    long count = 0;
    for (int path = 0; path < 200; ++path) {
      ErrorStats s;
      for (int t = 0; t < 2200; ++t) {
        monitors::UpdateErrorStats(s, beta, n01(gen));
        if (t >= 200) {
          sum2 += s.smoothed_error * s.smoothed_error;
          ++count;
        }
      }
    }
    CHECK(sum2 / static_cast<double>(count) == Approx(expected).epsilon(0.03));
  }
}

TEST_CASE("the 95% point of |Trigg| on iid errors matches the simulated table", "[reference]") {
  // REFERENCES.md Table A / C35 (simulated by tests/reference/simulated_tables.py): beta 0.1 ->
  // 0.538, beta 0.2 -> 0.735
  // (+/- 0.01 with >= 1e5 draws). E0 = 0, M0 = sqrt(2/pi), burn-in 1000.
  std::mt19937_64 gen(12345);
  std::normal_distribution<double> n01;
  for (auto [beta, q95] : {std::pair{0.1, 0.538}, std::pair{0.2, 0.735}}) {
    std::vector<double> values;
    for (int path = 0; path < 100; ++path) {
      ErrorStats s;
      s.mad = std::sqrt(2.0 / M_PI);
      for (int t = 0; t < 3000; ++t) {
        monitors::UpdateErrorStats(s, beta, n01(gen));
        if (t >= 1000 && t % 5 == 0) values.push_back(std::fabs(*monitors::TriggSignal(s)));
      }
    }
    std::sort(values.begin(), values.end());
    REQUIRE(values.size() >= 40000);
    CHECK(values[values.size() * 95 / 100] == Approx(q95).margin(0.01));
  }
}

TEST_CASE("the +/-4 MAD cusum rule fires on about 16% of in-control periods at alpha 0.1",
          "[reference]") {
  // REFERENCES.md Table B / C36 (simulated by tests/reference/simulated_tables.py): SES alpha =
  // beta = 0.1 on an iid N(0,1) level, forecast starting at the true mean, no reset: P(|C/M| > 4) =
  // 0.162 +/- 0.01.
  std::mt19937_64 gen(777);
  std::normal_distribution<double> n01;
  long beyond = 0, count = 0;
  for (int path = 0; path < 100; ++path) {
    ErrorStats s;
    double f = 0.0;
    for (int t = 0; t < 3000; ++t) {
      const double y = n01(gen), e = y - f;
      monitors::UpdateErrorStats(s, 0.1, e);
      f += 0.1 * e;
      if (t >= 1000) {
        ++count;
        if (std::fabs(*monitors::CusumSignal(s)) > 4) ++beyond;
      }
    }
  }
  CHECK(static_cast<double>(beyond) / static_cast<double>(count) == Approx(0.162).margin(0.01));
}

TEST_CASE("adaptive alpha is |E/M| clamped, and keeps its value while M is zero", "[unit]") {
  monitors::AdaptiveSpec spec{true, 0.05, 0.5, false};
  ErrorStats s;
  CHECK(monitors::AdaptiveAlpha(spec, s, 0.3) == 0.3);
  s.smoothed_error = -0.9;
  s.mad = 1.0;
  CHECK(monitors::AdaptiveAlpha(spec, s, 0.3) == 0.5);
  s.smoothed_error = 0.01;
  CHECK(monitors::AdaptiveAlpha(spec, s, 0.3) == 0.05);
  s.smoothed_error = 0.2;
  CHECK(monitors::AdaptiveAlpha(spec, s, 0.3) == Approx(0.2));
}

TEST_CASE("in-control run length to a false alarm at the quoted Trigg limit is about 58 periods",
          "[reference]") {
  // REFERENCES.md C37 [simulated by tests/reference/simulated_tables.py, iid errors, E0 = 0,
  // M0 = E|e|]: beta 0.1 with limit 0.51 gives a mean run length of ~58 periods (+/- 10 %).
  std::mt19937_64 gen(2024);
  std::normal_distribution<double> n01;
  double total = 0;
  const int paths = 4000;
  for (int path = 0; path < paths; ++path) {
    ErrorStats s;
    s.mad = std::sqrt(2.0 / M_PI);
    int t = 0;
    do {
      ++t;
      monitors::UpdateErrorStats(s, 0.1, n01(gen));
    } while (std::fabs(*monitors::TriggSignal(s)) <= 0.51 && t < 100000);
    total += t;
  }
  CHECK(total / paths == Approx(58).epsilon(0.10));
}
