// Error statistics, tracking signals and the Trigg-Leach adaptive smoothing constant.
//
//   e(t) = A(t) - F(t)                               actual minus forecast (NIST
//   e-Handbook 6.4.3.2) E(t) = beta*e(t)   + (1-beta)*E(t-1)             smoothed error (Trigg
//   1964) M(t) = beta*|e(t)| + (1-beta)*M(t-1)             smoothed absolute error, "MAD" C(t) =
//   C(t-1) + e(t)                             cumulative error (Brown 1959) Trigg's signal  T = E/M
//   (always within [-1, 1] when |E0| <= M0) cumulative signal = C/M, in MADs
// Both signals are undefined while M is 0. E, M and C start at 0 (M at the policy's
// initial_mad when one is given) and carry no bias correction.
//
// Adaptive response (Trigg & Leach 1967): alpha(t) = |E/M|, clamped to [floor, cap].
//   immediate: from E(t)/M(t), after this period's error is taken in;
//   lagged:    from E(t-1)/M(t-1), before it (the one-period lag attributed to Shone 1967).
// While M is 0 alpha keeps its previous value.
// Pure functions on caller-owned values.
#pragma once

#include <optional>

namespace monitors {

struct ErrorStats {
  double smoothed_error = 0.0;  // E
  double mad = 0.0;             // M
  double cusum = 0.0;           // C
};

// Takes in one error with monitoring constant beta.
inline void UpdateErrorStats(ErrorStats& s, double beta, double error) {
  s.smoothed_error = beta * error + (1.0 - beta) * s.smoothed_error;
  s.mad = beta * (error < 0 ? -error : error) + (1.0 - beta) * s.mad;
  s.cusum += error;
}

inline std::optional<double> TriggSignal(const ErrorStats& s) {
  if (!(s.mad > 0.0)) return std::nullopt;
  return s.smoothed_error / s.mad;
}

inline std::optional<double> CusumSignal(const ErrorStats& s) {
  if (!(s.mad > 0.0)) return std::nullopt;
  return s.cusum / s.mad;
}

struct AdaptiveSpec {
  bool enabled = false;
  double floor = 0.0;
  double cap = 1.0;
  bool lagged = true;
};

// The same adaptive rule: both off, or both on with the same bounds and timing.
inline bool SameAdaptive(const AdaptiveSpec& a, const AdaptiveSpec& b) {
  if (!a.enabled || !b.enabled) return a.enabled == b.enabled;
  return a.floor == b.floor && a.cap == b.cap && a.lagged == b.lagged;
}

// The adaptive alpha from the statistics `s` (E(t) for immediate, E(t-1) for lagged; the
// caller picks which), or `previous` while M is 0.
inline double AdaptiveAlpha(const AdaptiveSpec& spec, const ErrorStats& s, double previous) {
  if (!(s.mad > 0.0)) return previous;
  double a = s.smoothed_error / s.mad;
  if (a < 0) a = -a;
  if (a < spec.floor) a = spec.floor;
  if (a > spec.cap) a = spec.cap;
  return a;
}

}  // namespace monitors
