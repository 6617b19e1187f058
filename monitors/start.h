// Start rules: how a series gets its first state.
//
//   first-actual      the first period is the start window; level = its actual, trend 0; the
//                     forecast of period 2 is the actual of period 1 (NIST e-Handbook 6.4.3.1).
//                     Not for seasonal methods (they need seasonal terms).
//   mean_of_first k   the first k periods are the start window (no forecasts); then
//                     ses: level = mean of the window;
//                     holt/damped: least-squares line through the window, level = the line at
//                       the window's last period, trend = its slope;
//                     seasonal (k a multiple of m): cycle means give the trend (first to last
//                       cycle, 0 with one cycle); seasonal terms are the mean deviation (ratio
//                       for seasonal-mul) of each phase from that line, normalised to sum 0
//                       (mean 1).
//   explicit          level, trend and m seasonal terms are the state before period 1; the
//                     seasonal terms apply to periods 1..m in order. Period 1 has a forecast.
//   fitted n          the first n periods are the start window; the smoothing constants and
//                     start values that minimise the sum of squared one-step errors over the
//                     window are chosen (see fit.h), the window is run through the fitted model,
//                     and forecasting starts at period n+1 with the fitted constants.
// croston and sba start from the first demand (method.h) and take no start rule.
#pragma once

#include <vector>

#include "monitors/method.h"

namespace monitors {

enum class StartKind { kFirstActual, kMeanOfFirst, kExplicit, kFitted };

struct StartSpec {
  StartKind kind = StartKind::kFirstActual;
  int count = 1;  // periods in the start window (mean_of_first k, fitted n)
  double level = 0.0;
  double trend = 0.0;
  std::vector<double> season;  // explicit: m values, applied to periods 1..m
};

// Periods in the start window before the first forecast (0 for explicit and croston/sba).
int StartWindow(Method method, const StartSpec& start);

// The state before the window's first period from the mean_of_first heuristic above (level on
// the fitted line one period before the window, so that adding trend * window size gives the
// level at the window's last period). y.size() >= 1; seasonal methods need y.size() >= m.
ModelState HeuristicStart(Method method, const Constants& c, const std::vector<double>& y);

// The state after the start window for first-actual and mean_of_first.
ModelState StartFromWindow(Method method, const Constants& c, const StartSpec& start,
                           const std::vector<double>& y);

// The explicit start state (before period 1).
ModelState ExplicitStart(Method method, const Constants& c, const StartSpec& start);

}  // namespace monitors
