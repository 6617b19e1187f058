#include "monitors/fit.h"

#include <algorithm>
#include <cmath>
#include <limits>

#include "monitors/start.h"

namespace monitors {
namespace {

constexpr double kLo = 1e-4, kHi = 0.9999;

double ToBounded(double x) {
  return kLo + (kHi - kLo) / (1.0 + std::exp(-x));
}
double FromBounded(double p) {
  const double u = (p - kLo) / (kHi - kLo);
  return std::log(u / (1.0 - u));
}

int ParamCount(Method m) {
  if (m == Method::kSes) return 1;
  if (m == Method::kHolt || m == Method::kDamped) return 2;
  return 3;
}

Constants WithParams(Constants c, Method m, const double* p) {
  c.alpha = p[0];
  if (ParamCount(m) >= 2) c.beta = p[1];
  if (ParamCount(m) >= 3) c.gamma = p[2];
  return c;
}

// Start-state dimension for the linear methods: level (+ trend) (+ m-1 free seasonal terms).
int StateDim(Method method, const Constants& c) {
  if (method == Method::kSes) return 1;
  if (!IsSeasonal(method)) return 2;
  return 2 + c.season_length - 1;
}

ModelState UnitState(Method method, const Constants& c, int k) {
  ModelState s;
  if (IsSeasonal(method)) s.season.assign(static_cast<std::size_t>(c.season_length), 0.0);
  if (k < 0) return s;  // zero state
  if (k == 0) {
    s.level = 1.0;
  } else if (k == 1) {
    s.trend = 1.0;
  } else {
    // free seasonal term j = k-2; the last term carries minus the sum of the others
    s.season[static_cast<std::size_t>(k - 2)] = 1.0;
    s.season.back() = -1.0;
  }
  return s;
}

ModelState StateFromVector(Method method, const Constants& c, const std::vector<double>& x) {
  ModelState s = UnitState(method, c, -1);
  s.level = x[0];
  if (x.size() > 1) s.trend = x[1];
  if (IsSeasonal(method)) {
    double sum = 0.0;
    for (std::size_t j = 2; j < x.size(); ++j) {
      s.season[j - 2] = x[j];
      sum += x[j];
    }
    s.season.back() = -sum;
  }
  return s;
}

// Solves (A + ridge) x = b for symmetric positive semi-definite A (d x d, row-major).
std::vector<double> SolveSpd(std::vector<double> a, std::vector<double> b, int d) {
  double trace = 0.0;
  for (int i = 0; i < d; ++i) trace += a[i * d + i];
  const double ridge = 1e-13 * (trace > 0 ? trace : 1.0);
  for (int i = 0; i < d; ++i) a[i * d + i] += ridge;
  for (int j = 0; j < d; ++j) {  // Cholesky, lower triangle in place
    double diag = a[j * d + j];
    for (int k = 0; k < j; ++k) diag -= a[j * d + k] * a[j * d + k];
    diag = std::sqrt(std::max(diag, 1e-300));
    a[j * d + j] = diag;
    for (int i = j + 1; i < d; ++i) {
      double v = a[i * d + j];
      for (int k = 0; k < j; ++k) v -= a[i * d + k] * a[j * d + k];
      a[i * d + j] = v / diag;
    }
  }
  for (int i = 0; i < d; ++i) {
    double v = b[i];
    for (int k = 0; k < i; ++k) v -= a[i * d + k] * b[k];
    b[i] = v / a[i * d + i];
  }
  for (int i = d - 1; i >= 0; --i) {
    double v = b[i];
    for (int k = i + 1; k < d; ++k) v -= a[k * d + i] * b[k];
    b[i] = v / a[i * d + i];
  }
  return b;
}

// Best start state for fixed constants (linear methods); returns its SSE.
double BestLinearStart(Method method, const Constants& c, const std::vector<double>& y,
                       ModelState* best) {
  const int d = StateDim(method, c);
  const std::size_t n = y.size();
  // forecasts from the zero state with the data: f0; sensitivities to each start component.
  std::vector<double> r(n), jac(n * static_cast<std::size_t>(d));
  {
    ModelState s = UnitState(method, c, -1);
    for (std::size_t t = 0; t < n; ++t) {
      r[t] = y[t] - *ForecastNext(method, c, s, static_cast<long>(t));
      UpdateModel(method, c, s, static_cast<long>(t), y[t]);
    }
  }
  for (int k = 0; k < d; ++k) {
    ModelState s = UnitState(method, c, k);
    for (std::size_t t = 0; t < n; ++t) {
      jac[t * d + k] = *ForecastNext(method, c, s, static_cast<long>(t));
      UpdateModel(method, c, s, static_cast<long>(t), 0.0);
    }
  }
  std::vector<double> ata(static_cast<std::size_t>(d * d), 0.0), atr(d, 0.0);
  for (std::size_t t = 0; t < n; ++t) {
    const double* row = &jac[t * d];
    for (int i = 0; i < d; ++i) {
      atr[i] += row[i] * r[t];
      for (int j = 0; j <= i; ++j) ata[i * d + j] += row[i] * row[j];
    }
  }
  for (int i = 0; i < d; ++i)
    for (int j = i + 1; j < d; ++j) ata[i * d + j] = ata[j * d + i];
  std::vector<double> x = SolveSpd(ata, atr, d);
  ModelState s = StateFromVector(method, c, x);
  const double sse = WindowSse(method, c, s, y);
  if (best) *best = std::move(s);
  return sse;
}

struct Objective {
  Method method;
  Constants base;
  const std::vector<double>* y;
  ModelState mul_start;
  int evaluations = 0;

  double operator()(const double* p, ModelState* start) {
    ++evaluations;
    Constants c = WithParams(base, method, p);
    double sse;
    if (method == Method::kSeasonalMul) {
      sse = WindowSse(method, c, mul_start, *y);
      if (start) *start = mul_start;
    } else {
      sse = BestLinearStart(method, c, *y, start);
    }
    return std::isfinite(sse) ? sse : std::numeric_limits<double>::max();
  }
};

}  // namespace

double WindowSse(Method method, const Constants& c, const ModelState& start,
                 const std::vector<double>& y) {
  ModelState s = start;
  double sse = 0.0;
  for (std::size_t t = 0; t < y.size(); ++t) {
    const double e = y[t] - *ForecastNext(method, c, s, static_cast<long>(t));
    sse += e * e;
    UpdateModel(method, c, s, static_cast<long>(t), y[t]);
  }
  return sse;
}

FitResult FitStart(Method method, const Constants& base, const std::vector<double>& y) {
  Objective f{method, base, &y, {}, 0};
  if (method == Method::kSeasonalMul) f.mul_start = HeuristicStart(method, base, y);
  const int np = ParamCount(method);

  // Grid: 10 values per constant.
  double best[3] = {0.5, 0.5, 0.5}, best_f = std::numeric_limits<double>::max();
  const int points = np == 1 ? 10 : np == 2 ? 100 : 1000;
  for (int g = 0; g < points; ++g) {
    double p[3];
    int rest = g;
    for (int k = 0; k < np; ++k) {
      p[k] = 0.05 + 0.1 * (rest % 10);
      rest /= 10;
    }
    const double v = f(p, nullptr);
    if (v < best_f) {
      best_f = v;
      std::copy(p, p + 3, best);
    }
  }

  // Nelder-Mead on x = logit-transformed constants.
  const int nv = np + 1;
  std::vector<std::vector<double>> simplex(nv, std::vector<double>(np));
  std::vector<double> fv(nv);
  auto eval = [&](const std::vector<double>& x) {
    double p[3];
    for (int k = 0; k < np; ++k) p[k] = ToBounded(x[k]);
    return f(p, nullptr);
  };
  for (int k = 0; k < np; ++k) simplex[0][k] = FromBounded(best[k]);
  for (int v = 1; v < nv; ++v) {
    simplex[v] = simplex[0];
    simplex[v][v - 1] += 0.5;
  }
  for (int v = 0; v < nv; ++v) fv[v] = eval(simplex[v]);
  for (int iter = 0; iter < 4000 && f.evaluations < 5000; ++iter) {
    std::vector<int> order(nv);
    for (int v = 0; v < nv; ++v) order[v] = v;
    std::sort(order.begin(), order.end(), [&](int a, int b) { return fv[a] < fv[b]; });
    const int lo = order[0], hi = order[nv - 1], second = order[nv - 2];
    const double spread = std::fabs(fv[hi] - fv[lo]);
    double size = 0.0;
    for (int v = 0; v < nv; ++v)
      for (int k = 0; k < np; ++k) size = std::max(size, std::fabs(simplex[v][k] - simplex[lo][k]));
    if (spread <= 1e-13 * (std::fabs(fv[lo]) + 1e-30) && size < 1e-7) break;
    if (size < 1e-10) break;
    std::vector<double> centroid(np, 0.0);
    for (int v = 0; v < nv; ++v)
      if (v != hi)
        for (int k = 0; k < np; ++k) centroid[k] += simplex[v][k] / np;
    auto along = [&](double t) {
      std::vector<double> x(np);
      for (int k = 0; k < np; ++k) x[k] = centroid[k] + t * (simplex[hi][k] - centroid[k]);
      return x;
    };
    std::vector<double> xr = along(-1.0);
    const double fr = eval(xr);
    if (fr < fv[lo]) {
      std::vector<double> xe = along(-2.0);
      const double fe = eval(xe);
      if (fe < fr) {
        simplex[hi] = xe, fv[hi] = fe;
      } else {
        simplex[hi] = xr, fv[hi] = fr;
      }
    } else if (fr < fv[second]) {
      simplex[hi] = xr, fv[hi] = fr;
    } else {
      const bool outside = fr < fv[hi];
      std::vector<double> xc = along(outside ? -0.5 : 0.5);
      const double fc = eval(xc);
      if (fc < (outside ? fr : fv[hi])) {
        simplex[hi] = xc, fv[hi] = fc;
      } else {
        for (int v = 0; v < nv; ++v) {
          if (v == lo) continue;
          for (int k = 0; k < np; ++k)
            simplex[v][k] = simplex[lo][k] + 0.5 * (simplex[v][k] - simplex[lo][k]);
          fv[v] = eval(simplex[v]);
        }
      }
    }
  }
  int lo = 0;
  for (int v = 1; v < nv; ++v)
    if (fv[v] < fv[lo]) lo = v;
  double p[3] = {best[0], best[1], best[2]};
  if (fv[lo] <= best_f)
    for (int k = 0; k < np; ++k) p[k] = ToBounded(simplex[lo][k]);

  FitResult result;
  result.constants = WithParams(base, method, p);
  result.sse = f(p, &result.start);
  result.evaluations = f.evaluations;
  return result;
}

}  // namespace monitors
