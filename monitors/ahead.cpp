#include "monitors/ahead.h"

#include <algorithm>

namespace monitors {

std::optional<double> RelativeVariance(Method method, const Constants& c, int h) {
  if (h < 1) return std::nullopt;
  std::vector<double> all(static_cast<std::size_t>(h));
  if (!RelativeVariances(method, c, h, all.data())) return std::nullopt;
  return all.back();
}

bool RelativeVariances(Method method, const Constants& c, int horizon, double* out) {
  if (method == Method::kSeasonalMul || IsIntermittent(method)) return false;
  const bool trend = HasTrend(method);
  const bool seasonal = IsSeasonal(method);
  const double beta = trend ? c.alpha * c.beta : 0.0;
  const double gamma = seasonal ? c.gamma : 0.0;
  const int m = seasonal ? std::max(1, c.season_length) : 0;
  double sum = 0.0, phi_j = 0.0, phi_power = 1.0;
  for (int h = 1; h <= horizon; ++h) {
    out[h - 1] = 1.0 + sum;
    // the term c_j of j = h, added for the next h
    phi_power *= c.phi;
    phi_j += phi_power;
    const double d = seasonal && h % m == 0 ? 1.0 : 0.0;
    const double cj = c.alpha + beta * phi_j + gamma * d;
    sum += cj * cj;
  }
  return true;
}

int SeasonTermsAhead(Method method, const Constants& c, int horizon) {
  if (!IsSeasonal(method) || horizon < 1) return 0;
  return std::min(horizon, std::max(1, c.season_length));
}

bool SeedAhead(Method method, const Constants& c, const ModelState& s, long next_index, int horizon,
               AheadSeed& seed, double* season_next) {
  if (IsIntermittent(method)) {
    const std::optional<double> rate = ForecastNext(method, c, s, next_index);
    if (!rate) return false;
    seed = AheadSeed{*rate, 0.0};
    return true;
  }
  seed = AheadSeed{s.level, HasTrend(method) ? s.trend : 0.0};
  const int terms = SeasonTermsAhead(method, c, horizon);
  const long m = std::max(1, c.season_length);
  for (int h = 1; h <= terms; ++h) {
    const long index = next_index + h - 1;
    const std::size_t phase = static_cast<std::size_t>(((index % m) + m) % m);
    season_next[h - 1] = phase < s.season.size() ? s.season[phase] : 0.0;
  }
  return true;
}

void ForecastFromSeed(Method method, const Constants& c, const AheadSeed& seed,
                      const double* season_next, int horizon, double* out) {
  if (IsIntermittent(method)) {
    for (int h = 1; h <= horizon; ++h) out[h - 1] = seed.level;
    return;
  }
  const bool seasonal = IsSeasonal(method);
  const int terms = SeasonTermsAhead(method, c, horizon);
  double phi_h = 0.0, phi_power = 1.0;
  for (int h = 1; h <= horizon; ++h) {
    phi_power *= c.phi;
    phi_h += phi_power;  // phi + ... + phi^h (= h undamped); trend is 0 without a trend
    const double base = seed.level + phi_h * seed.trend;
    if (!seasonal) {
      out[h - 1] = base;
      continue;
    }
    const double season = season_next[(h - 1) % terms];
    out[h - 1] = method == Method::kSeasonalMul ? base * season : base + season;
  }
}

std::vector<double> ForecastAhead(Method method, const Constants& c, const ModelState& s,
                                  long next_index, int horizon) {
  std::vector<double> out;
  if (horizon < 1) return out;
  std::vector<double> season(static_cast<std::size_t>(SeasonTermsAhead(method, c, horizon)));
  AheadSeed seed;
  if (!SeedAhead(method, c, s, next_index, horizon, seed, season.data())) return out;
  out.resize(static_cast<std::size_t>(horizon));
  ForecastFromSeed(method, c, seed, season.data(), horizon, out.data());
  return out;
}

}  // namespace monitors
