// `forewarden simulate`: invented demand for the demo, tests and benchmarks.
//
// The scenario: a chain of garden and hardware stores in four regions (north, south, east,
// west). Series keys read REGION/store-NNN/sku-NNNNN; the first digit of the sku number says
// what kind of series it is, so policies can match on it:
//   sku-1xxxx .. sku-4xxxx  steady sellers (level + noise)
//   sku-5xxxx               seasonal sellers (a yearly cycle)
//   sku-9xxxx               slow movers (intermittent demand)
// Some series get one injected change at a random period in the later three quarters of the
// run: step-up, step-down, trend-start or spike (one period). Values are whole units >= 0.
// Deterministic for a given seed on every platform (own generators on std::mt19937_64).
#pragma once

#include <cstdint>
#include <string>

#include "monitors/period.h"

namespace forewarden {

struct SimulateOptions {
  long series = 1000;
  long periods = 104;
  std::uint64_t seed = 1;
  monitors::PeriodKind period = monitors::PeriodKind::kWeek;
  std::string start = "2025-01-06";  // first period (any date inside it)
  double intermittent_share = 0.1;
  double seasonal_share = 0.2;
  double change_share = 0.3;  // share of series with one injected change
  double level_min = 5.0;     // steady and seasonal levels: log-uniform in [min, max] units
  double level_max = 400.0;
  double noise = 0.3;        // noise s.d. as a share of the level: uniform in [noise/3, noise]
  std::string output = "-";  // actuals CSV: series,period,value (period-major order)
  std::string truth;         // optional: series,period,kind of each injected change
};

// Returns 0 on success; otherwise `error` says what went wrong (1: I/O, 2: bad option).
int RunSimulate(const SimulateOptions& options, std::string& error);

}  // namespace forewarden
