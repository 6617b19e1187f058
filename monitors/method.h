// Smoothing methods: the one-period update of each forecasting method on a small state.
//
// Forms and sources (all additive-trend forms use the level-difference trend update):
//   ses          F(t+1) = l(t) = l(t-1) + alpha*(y(t) - l(t-1))            NIST e-Handbook 6.4.3.1
//   holt/damped  l(t) = alpha*y(t) + (1-alpha)*(l(t-1) + phi*b(t-1))
//                b(t) = beta*(l(t) - l(t-1)) + (1-beta)*phi*b(t-1)
//                F(t+1) = l(t) + phi*b(t)                  (holt: phi = 1)   FPP3 8.2; R
//                HoltWinters
//   seasonal-add l(t) = alpha*(y(t) - s(t-m)) + (1-alpha)*(l(t-1) + phi*b(t-1))
//                s(t) = gamma*(y(t) - l(t-1) - phi*b(t-1)) + (1-gamma)*s(t-m)
//                F(t+1) = l(t) + phi*b(t) + s(t+1-m)
//   seasonal-mul l(t) = alpha*y(t)/s(t-m) + (1-alpha)*(l(t-1) + phi*b(t-1))
//                s(t) = gamma*y(t)/(l(t-1) + phi*b(t-1)) + (1-gamma)*s(t-m)
//                F(t+1) = (l(t) + phi*b(t)) * s(t+1-m)
//                The seasonal term uses the previous level and trend, as statsmodels'
//                ExponentialSmoothing does (REFERENCES.md F7).
//   croston/sba  sizes z and intervals p smoothed only in periods with demand; the first demand
//                and its interval (counted from the period before the first period) start both
//                smoothings, as R forecast's croston(); F = z/p, sba F = (1 - alpha/2)*z/p
//                (Croston 1972; Syntetos & Boylan 2005).
// Pure functions on caller-owned values; no shared state.
#pragma once

#include <cstdint>
#include <optional>
#include <string_view>
#include <vector>

namespace monitors {

enum class Method { kSes, kHolt, kDamped, kSeasonalAdd, kSeasonalMul, kCroston, kSba };

// "ses", "holt", "damped", "seasonal-add", "seasonal-mul", "croston", "sba".
std::string_view MethodName(Method method);
std::optional<Method> ParseMethod(std::string_view text);

inline bool HasTrend(Method m) {
  return m == Method::kHolt || m == Method::kDamped || m == Method::kSeasonalAdd ||
         m == Method::kSeasonalMul;
}
inline bool IsSeasonal(Method m) {
  return m == Method::kSeasonalAdd || m == Method::kSeasonalMul;
}
inline bool IsIntermittent(Method m) {
  return m == Method::kCroston || m == Method::kSba;
}

// The smoothing constants of one series. alpha may change over time (adaptive policies).
struct Constants {
  double alpha = 0.2;     // level (croston/sba: sizes and intervals)
  double beta = 0.1;      // trend, on level differences
  double phi = 1.0;       // damping; 1 for every method but damped (seasonal-* may set it)
  double gamma = 0.1;     // seasonal
  int season_length = 1;  // m, seasonal methods only
};

// Model state after the last processed period. For seasonal methods season[j] holds the
// seasonal term of every period whose index (0 = the series' first period) is j modulo m.
struct ModelState {
  double level = 0.0;
  double trend = 0.0;
  std::vector<double> season;
  // croston / sba
  double size = 0.0;              // smoothed demand size z
  double interval = 0.0;          // smoothed inter-demand interval p
  std::int32_t since_demand = 0;  // periods since the previous demand (or before the first period)
  bool has_demand = false;        // a demand has been seen: forecasts exist
};

// The one-step forecast for the period with index `next_index`; nullopt when none exists yet
// (croston before the first demand).
std::optional<double> ForecastNext(Method method, const Constants& c, const ModelState& s,
                                   long next_index);

// Applies the actual y of the period with index `index`. alpha is taken from c.alpha.
void UpdateModel(Method method, const Constants& c, ModelState& s, long index, double y);

// A period passes with no actual (gap rule "skip"): level moves on by the (damped) trend,
// seasonal terms stay, croston counts the period towards the next interval.
void CoastModel(Method method, const Constants& c, ModelState& s);

}  // namespace monitors
