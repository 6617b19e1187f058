// Prediction intervals from the smoothed absolute error.
//
// For normally distributed errors E|e| = sqrt(2/pi)*sigma, so sigma = sqrt(pi/2)*MAD
// = 1.2533141*MAD (REFERENCES.md F2, C25). The interval of a one-step forecast F at coverage c is
//   F -/+ z((1+c)/2) * sqrt(pi/2) * M
// where M is the MAD *before* the period's own error is taken in, so the band is fixed
// together with the forecast.
#pragma once

namespace monitors {

inline constexpr double kSigmaPerMad = 1.2533141373155003;  // sqrt(pi/2)

// Inverse of the standard normal distribution function, p in (0, 1); accurate to about 1e-15
// (Acklam's rational approximation refined by one Halley step on erfc).
double NormalQuantile(double p);

// Half-width of the interval at `coverage` (0 < coverage < 1) for a MAD of `mad`.
double IntervalHalfWidth(double coverage, double mad);

}  // namespace monitors
