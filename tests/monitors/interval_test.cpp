#include "monitors/interval.h"

#include <catch2/catch.hpp>

TEST_CASE("normal quantiles match the exact z values", "[reference]") {
  // REFERENCES.md C26: exact normal quantiles (any statistics table).
  CHECK(monitors::NormalQuantile(0.90) == Approx(1.2815516).margin(1e-7));
  CHECK(monitors::NormalQuantile(0.95) == Approx(1.6448536).margin(1e-7));
  CHECK(monitors::NormalQuantile(0.975) == Approx(1.9599640).margin(1e-7));
  CHECK(monitors::NormalQuantile(0.995) == Approx(2.5758293).margin(1e-7));
  CHECK(monitors::NormalQuantile(0.5) == Approx(0.0).margin(1e-15));
  CHECK(monitors::NormalQuantile(0.001) == Approx(-3.090232306167814).margin(1e-12));
  CHECK(monitors::NormalQuantile(1e-10) == Approx(-6.361340902404056).margin(1e-9));
}

TEST_CASE("sigma is sqrt(pi/2) times the MAD", "[reference]") {
  // REFERENCES.md F2, C25, exact for normal errors: sigma = 1.2533141 * MAD for normal errors.
  CHECK(monitors::kSigmaPerMad == Approx(1.2533141).margin(1e-7));
  CHECK(monitors::IntervalHalfWidth(0.95, 2.0) == Approx(1.9599640 * 1.2533141 * 2.0).margin(1e-6));
}
