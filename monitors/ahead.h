// Forecasts several periods ahead, with prediction intervals from the analytic variance of each
// method's class of state-space model (Hyndman, Koehler, Ord and Snyder 2008, "Forecasting with
// Exponential Smoothing", chapter 6, class 1: linear models with additive errors).
//
// For the additive-error models the h-step forecast variance is
//   v_h = sigma^2 * (1 + sum_{j=1}^{h-1} c_j^2)
// with c_j = alpha + beta * phi_j + gamma * d_j, where phi_j = phi + ... + phi^j (j for an
// undamped trend, 0 without a trend), d_j = 1 when j is a multiple of the season length m
// (else 0), and beta, gamma the model's own constants: beta = alpha * trend_beta (the trend
// constant on level differences used here), gamma = season_gamma (the season is updated from
// the one-step error, as in the model). sigma is the one-step error's standard deviation, which
// forewarden estimates as 1.2533 * MAD (monitors/interval.h).
//
// seasonal-mul (class 3) has no closed form: forecasts without an interval. croston and sba
// forecast a demand rate per period, the same for every h; their interval is not given (the
// methods have no stochastic model whose rate forecasts carry one; Shenstone and Hyndman 2005).
#pragma once

#include <optional>
#include <vector>

#include "monitors/method.h"

namespace monitors {

// The relative variance v_h / sigma^2 of the h-step forecast (h >= 1), or nullopt when the
// method has no analytic interval.
std::optional<double> RelativeVariance(Method method, const Constants& c, int h);

// RelativeVariance for h = 1 .. horizon into out[0 .. horizon-1], in one pass; false (out
// untouched) when the method has no analytic interval.
bool RelativeVariances(Method method, const Constants& c, int horizon, double* out);

// The forecasts for the periods with index next_index .. next_index + horizon - 1, from the
// state after the last processed period; empty when the method has none yet.
std::vector<double> ForecastAhead(Method method, const Constants& c, const ModelState& s,
                                  long next_index, int horizon);

// What the forecasts ahead need of a state, small enough to copy for every series at once (an
// export): level and trend (croston/sba: the demand rate in `level`), and the seasonal terms of
// the next min(horizon, m) periods in order, `season_next[(h-1) % m]` for period h.
struct AheadSeed {
  double level = 0.0;
  double trend = 0.0;
};
// The number of seasonal terms a seed of this horizon carries (0 for non-seasonal methods).
int SeasonTermsAhead(Method method, const Constants& c, int horizon);
// Fills `seed` and `season_next` (SeasonTermsAhead entries); false when the method has no
// forecast yet (croston and sba before the first demand).
bool SeedAhead(Method method, const Constants& c, const ModelState& s, long next_index, int horizon,
               AheadSeed& seed, double* season_next);
// The forecasts h = 1 .. horizon from a seed into out[0 .. horizon-1]; ForecastAhead's values.
void ForecastFromSeed(Method method, const Constants& c, const AheadSeed& seed,
                      const double* season_next, int horizon, double* out);

}  // namespace monitors
