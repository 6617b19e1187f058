// The "fitted" start rule: smoothing constants and start values that minimise the sum of
// squared one-step errors over a window, e(t) = y(t) - F(t) for every period of the window
// (the first forecast comes from the start state). This is the criterion of R forecast's
// ses/holt(initial = "optimal") (ets with opt.crit = "mse").
//
// The search:
//  * For ses, holt, damped and seasonal-add every one-step forecast is an affine function of
//    the start state once the constants are fixed, so for given constants the best start state
//    is a linear least-squares problem, solved exactly (normal equations, Cholesky). The
//    seasonal terms are constrained to sum to 0 (otherwise level and seasons trade off).
//  * seasonal-mul takes its start state from the mean_of_first heuristic (start.h) over the
//    whole window; only the constants are searched.
//  * Constants (alpha; holt/damped add beta; seasonal-* add beta and gamma; damping phi is
//    kept as configured) range over [1e-4, 0.9999], the bounds R's ets uses. A grid of 10
//    values per constant picks the starting point, then Nelder-Mead on a logistic transform
//    of the bounded constants refines it (at most 4000 evaluations).
// Deterministic; pure.
#pragma once

#include <vector>

#include "monitors/method.h"

namespace monitors {

struct FitResult {
  Constants constants;  // fitted constants (phi and season_length as given)
  ModelState start;     // state before the window's first period
  double sse = 0.0;     // sum of squared one-step errors over the window
  int evaluations = 0;  // objective evaluations used
};

// Requires y.size() >= 3 (+ 1 per trend, 2*m for seasonal: checked by config validation).
FitResult FitStart(Method method, const Constants& base, const std::vector<double>& y);

// The sum of squared one-step errors of `method` with constants c from state `start` over y.
double WindowSse(Method method, const Constants& c, const ModelState& start,
                 const std::vector<double>& y);

}  // namespace monitors
