#include "monitors/ahead.h"

namespace monitors {

std::optional<double> RelativeVariance(Method method, const Constants& c, int h) {
  if (method == Method::kSeasonalMul || IsIntermittent(method) || h < 1) return std::nullopt;
  const bool trend = HasTrend(method);
  const bool seasonal = IsSeasonal(method);
  const double beta = trend ? c.alpha * c.beta : 0.0;
  const double gamma = seasonal ? c.gamma : 0.0;
  const int m = seasonal ? std::max(1, c.season_length) : 0;
  double sum = 0.0, phi_j = 0.0, phi_power = 1.0;
  for (int j = 1; j < h; ++j) {
    phi_power *= c.phi;
    phi_j += phi_power;  // phi + phi^2 + ... + phi^j (= j when phi = 1)
    const double d = seasonal && j % m == 0 ? 1.0 : 0.0;
    const double cj = c.alpha + beta * phi_j + gamma * d;
    sum += cj * cj;
  }
  return 1.0 + sum;
}

std::vector<double> ForecastAhead(Method method, const Constants& c, const ModelState& s,
                                  long next_index, int horizon) {
  std::vector<double> out;
  if (horizon < 1) return out;
  if (IsIntermittent(method)) {
    const std::optional<double> rate = ForecastNext(method, c, s, next_index);
    if (rate) out.assign(static_cast<std::size_t>(horizon), *rate);
    return out;
  }
  out.reserve(static_cast<std::size_t>(horizon));
  double phi_h = 0.0, phi_power = 1.0;
  for (int h = 1; h <= horizon; ++h) {
    phi_power *= c.phi;
    phi_h += phi_power;
    const double base = s.level + (HasTrend(method) ? phi_h * s.trend : 0.0);
    if (IsSeasonal(method)) {
      const long m = std::max(1, c.season_length);
      const long index = next_index + h - 1;
      const std::size_t phase = static_cast<std::size_t>(((index % m) + m) % m);
      const double season = phase < s.season.size() ? s.season[phase] : 0.0;
      out.push_back(method == Method::kSeasonalMul ? base * season : base + season);
    } else {
      out.push_back(base);
    }
  }
  return out;
}

}  // namespace monitors
