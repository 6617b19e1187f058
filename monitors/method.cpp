#include "monitors/method.h"

namespace monitors {

std::string_view MethodName(Method method) {
  switch (method) {
    case Method::kSes:
      return "ses";
    case Method::kHolt:
      return "holt";
    case Method::kDamped:
      return "damped";
    case Method::kSeasonalAdd:
      return "seasonal-add";
    case Method::kSeasonalMul:
      return "seasonal-mul";
    case Method::kCroston:
      return "croston";
    case Method::kSba:
      return "sba";
  }
  return "?";
}

std::optional<Method> ParseMethod(std::string_view t) {
  if (t == "ses") return Method::kSes;
  if (t == "holt") return Method::kHolt;
  if (t == "damped") return Method::kDamped;
  if (t == "seasonal-add") return Method::kSeasonalAdd;
  if (t == "seasonal-mul") return Method::kSeasonalMul;
  if (t == "croston") return Method::kCroston;
  if (t == "sba") return Method::kSba;
  return std::nullopt;
}

namespace {
inline std::size_t Phase(long index, int m) {
  long r = index % m;
  return static_cast<std::size_t>(r < 0 ? r + m : r);
}
}  // namespace

std::optional<double> ForecastNext(Method method, const Constants& c, const ModelState& s,
                                   long next_index) {
  switch (method) {
    case Method::kSes:
      return s.level;
    case Method::kHolt:
    case Method::kDamped:
      return s.level + c.phi * s.trend;
    case Method::kSeasonalAdd:
      return s.level + c.phi * s.trend + s.season[Phase(next_index, c.season_length)];
    case Method::kSeasonalMul:
      return (s.level + c.phi * s.trend) * s.season[Phase(next_index, c.season_length)];
    case Method::kCroston:
      if (!s.has_demand) return std::nullopt;
      return s.size / s.interval;
    case Method::kSba:
      if (!s.has_demand) return std::nullopt;
      return (1.0 - c.alpha / 2.0) * s.size / s.interval;
  }
  return std::nullopt;
}

void UpdateModel(Method method, const Constants& c, ModelState& s, long index, double y) {
  const double a = c.alpha;
  switch (method) {
    case Method::kSes:
      s.level = a * y + (1.0 - a) * s.level;
      return;
    case Method::kHolt:
    case Method::kDamped: {
      const double lp = s.level, bp = s.trend;
      s.level = a * y + (1.0 - a) * (lp + c.phi * bp);
      s.trend = c.beta * (s.level - lp) + (1.0 - c.beta) * c.phi * bp;
      return;
    }
    case Method::kSeasonalAdd: {
      const double lp = s.level, bp = s.trend, base = lp + c.phi * bp;
      double& sj = s.season[Phase(index, c.season_length)];
      s.level = a * (y - sj) + (1.0 - a) * base;
      s.trend = c.beta * (s.level - lp) + (1.0 - c.beta) * c.phi * bp;
      sj = c.gamma * (y - base) + (1.0 - c.gamma) * sj;
      return;
    }
    case Method::kSeasonalMul: {
      const double lp = s.level, bp = s.trend, base = lp + c.phi * bp;
      double& sj = s.season[Phase(index, c.season_length)];
      s.level = a * (y / sj) + (1.0 - a) * base;
      s.trend = c.beta * (s.level - lp) + (1.0 - c.beta) * c.phi * bp;
      sj = c.gamma * (y / base) + (1.0 - c.gamma) * sj;
      return;
    }
    case Method::kCroston:
    case Method::kSba: {
      s.since_demand += 1;
      if (y > 0.0) {
        if (!s.has_demand) {
          s.size = y;
          s.interval = static_cast<double>(s.since_demand);
          s.has_demand = true;
        } else {
          s.size = a * y + (1.0 - a) * s.size;
          s.interval = a * static_cast<double>(s.since_demand) + (1.0 - a) * s.interval;
        }
        s.since_demand = 0;
      }
      return;
    }
  }
}

void CoastModel(Method method, const Constants& c, ModelState& s) {
  if (IsIntermittent(method)) {
    s.since_demand += 1;
    return;
  }
  s.level += c.phi * s.trend;
  s.trend *= c.phi;
}

}  // namespace monitors
