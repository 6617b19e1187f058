#include "monitors/start.h"

namespace monitors {

int StartWindow(Method method, const StartSpec& start) {
  if (IsIntermittent(method)) return 0;
  switch (start.kind) {
    case StartKind::kFirstActual:
      return 1;
    case StartKind::kMeanOfFirst:
    case StartKind::kFitted:
      return start.count;
    case StartKind::kExplicit:
      return 0;
  }
  return 0;
}

namespace {

// Least-squares line y = a + b*i over i = 0..n-1.
void FitLine(const std::vector<double>& y, double& a, double& b) {
  const std::size_t n = y.size();
  if (n < 2) {
    a = n ? y[0] : 0.0;
    b = 0.0;
    return;
  }
  double mean_i = (static_cast<double>(n) - 1.0) / 2.0, mean_y = 0.0;
  for (double v : y) mean_y += v;
  mean_y /= static_cast<double>(n);
  double sxy = 0.0, sxx = 0.0;
  for (std::size_t i = 0; i < n; ++i) {
    const double di = static_cast<double>(i) - mean_i;
    sxy += di * (y[i] - mean_y);
    sxx += di * di;
  }
  b = sxy / sxx;
  a = mean_y - b * mean_i;
}

}  // namespace

ModelState HeuristicStart(Method method, const Constants& c, const std::vector<double>& y) {
  ModelState s;
  const std::size_t n = y.size();
  if (method == Method::kSes) {
    double sum = 0.0;
    for (double v : y) sum += v;
    s.level = sum / static_cast<double>(n);
    return s;
  }
  if (!IsSeasonal(method)) {
    double a = 0.0, b = 0.0;
    FitLine(y, a, b);
    s.level = a - b;  // the line one period before the window
    s.trend = b;
    return s;
  }
  const std::size_t m = static_cast<std::size_t>(c.season_length);
  const std::size_t cycles = n / m;
  std::vector<double> cycle_mean(cycles, 0.0);
  for (std::size_t k = 0; k < cycles; ++k) {
    for (std::size_t j = 0; j < m; ++j) cycle_mean[k] += y[k * m + j];
    cycle_mean[k] /= static_cast<double>(m);
  }
  const double b =
      cycles >= 2 ? (cycle_mean[cycles - 1] - cycle_mean[0]) / static_cast<double>((cycles - 1) * m)
                  : 0.0;
  // cycle_mean[0] sits at the middle of the first cycle, index (m-1)/2.
  const double line_at_minus1 = cycle_mean[0] - b * ((static_cast<double>(m) - 1.0) / 2.0 + 1.0);
  s.level = line_at_minus1;
  s.trend = b;
  s.season.assign(m, 0.0);
  const bool mul = method == Method::kSeasonalMul;
  for (std::size_t i = 0; i < cycles * m; ++i) {
    const double line = line_at_minus1 + b * static_cast<double>(i + 1);
    s.season[i % m] += mul ? y[i] / line : y[i] - line;
  }
  double total = 0.0;
  for (double& v : s.season) {
    v /= static_cast<double>(cycles);
    total += v;
  }
  const double mean = total / static_cast<double>(m);
  for (double& v : s.season) v = mul ? v / mean : v - mean;
  return s;
}

ModelState StartFromWindow(Method method, const Constants& c, const StartSpec& start,
                           const std::vector<double>& y) {
  ModelState s;
  if (start.kind == StartKind::kFirstActual) {
    s.level = y.front();
    if (IsSeasonal(method))
      s.season.assign(static_cast<std::size_t>(c.season_length),
                      method == Method::kSeasonalMul ? 1.0 : 0.0);
    return s;
  }
  s = HeuristicStart(method, c, y);
  s.level += s.trend * static_cast<double>(y.size());
  return s;
}

ModelState ExplicitStart(Method method, const Constants& c, const StartSpec& start) {
  ModelState s;
  s.level = start.level;
  s.trend = HasTrend(method) ? start.trend : 0.0;
  if (IsSeasonal(method)) {
    s.season = start.season;
    s.season.resize(static_cast<std::size_t>(c.season_length),
                    method == Method::kSeasonalMul ? 1.0 : 0.0);
  }
  return s;
}

}  // namespace monitors
