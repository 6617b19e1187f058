#include "monitors/series.h"

#include <cmath>

#include "monitors/fit.h"
#include "monitors/interval.h"

namespace monitors {
namespace {
void Evaluate(const RuleSpec& rule, SeriesState& s, std::size_t i, std::optional<double> value,
              StepResult& out, int age = kSteadyAge);
}  // namespace

std::uint16_t RecentCapacity(const PolicySpec& policy) {
  int cap = 0;
  for (const RuleSpec& r : policy.rules)
    if (r.signal == SignalKind::kBias || r.signal == SignalKind::kAccuracy ||
        r.signal == SignalKind::kCusum)
      cap = std::max(cap, r.periods);
  return static_cast<std::uint16_t>(std::min(cap, 65535));
}

std::optional<double> RuleValue(const RuleSpec& rule, const StepResult& r, const SeriesState& s) {
  switch (rule.signal) {
    case SignalKind::kTrigg:
      return r.trigg;
    case SignalKind::kCusum: {
      if (rule.periods == 0) return r.cusum;
      // the errors of the newest `periods` periods in MADs from before them: a shift does not
      // inflate its own yardstick
      RecentWindow::Sums w;
      if (!r.cusum || !s.recent.Sum(rule.periods, w) || !(w.mad_before > 0.0)) return std::nullopt;
      return w.error / w.mad_before;
    }
    case SignalKind::kError:
      return r.spike;
    case SignalKind::kAlphaAtCap:
      if (!r.has_forecast) return std::nullopt;
      return r.at_cap ? 1.0 : 0.0;
    case SignalKind::kBias:
    case SignalKind::kAccuracy: {
      RecentWindow::Sums w;
      if (!r.has_forecast || !s.recent.Sum(rule.periods, w) || !(w.actual > 0.0))
        return std::nullopt;
      return (rule.signal == SignalKind::kBias ? w.error : w.abs_error) / w.actual;
    }
    case SignalKind::kStale:
      return std::nullopt;
  }
  return std::nullopt;
}

void CheckStale(const PolicySpec& p, SeriesState& s, long overdue, StepResult& out) {
  if (!s.seen) return;
  for (std::size_t i = 0; i < p.rules.size(); ++i)
    if (p.rules[i].signal == SignalKind::kStale)
      Evaluate(p.rules[i], s, i, static_cast<double>(overdue), out);
}

SeriesState NewSeriesState(const PolicySpec& policy) {
  SeriesState s;
  s.alpha = policy.constants.alpha;
  s.stats.mad = policy.initial_mad;
  s.rules.assign(policy.rules.size(), RuleState{});
  if (IsIntermittent(policy.method)) {
    s.started = true;
  } else if (policy.start.kind == StartKind::kExplicit) {
    s.model = ExplicitStart(policy.method, policy.constants, policy.start);
    s.started = true;
  }
  return s;
}

namespace {

void StartSeries(const PolicySpec& p, SeriesState& s) {
  if (p.start.kind == StartKind::kFitted) {
    const std::vector<double>& window = s.window.values();
    FitResult fit = FitStart(p.method, p.constants, window);
    s.own.set(fit.constants);
    s.alpha = fit.constants.alpha;
    s.model = fit.start;
    for (std::size_t t = 0; t < window.size(); ++t)
      UpdateModel(p.method, fit.constants, s.model, static_cast<long>(t), window[t]);
  } else {
    s.model = StartFromWindow(p.method, p.constants, p.start, s.window.values());
  }
  s.started = true;
  s.window.clear();
}

// Evaluates rule i with `value` at the series' `age`, recording what changed in `out` and
// s.active.
void Evaluate(const RuleSpec& rule, SeriesState& s, std::size_t i, std::optional<double> value,
              StepResult& out, int age) {
  const RuleChange change = EvaluateRule(rule, s.rules[i], value, age);
  const std::uint64_t bit = std::uint64_t{1} << i;
  if (change == RuleChange::kOpened) {
    s.active |= bit;
    out.opened |= bit;
  } else if (change == RuleChange::kCleared) {
    s.active &= ~bit;
    out.cleared |= bit;
  }
  const EpisodeChange ep = AdvanceEpisode(rule, s.rules[i], value);
  if (ep.opened) out.episodes_opened |= bit;
  if (ep.escalated) out.episodes_escalated |= bit;
  if (ep.resolved) out.episodes_resolved |= bit;
}

// One observed period (index s.next_index). Fills `out` for that period.
void Observe(const PolicySpec& p, SeriesState& s, double y, StepResult& out) {
  const long index = s.next_index++;
  out.has_forecast = false;
  out.trigg.reset();
  out.cusum.reset();
  out.spike.reset();
  out.at_cap = false;
  out.lower.reset();
  out.upper.reset();
  out.alpha = s.alpha;
  if (!s.started) {
    s.window.push_back(y);
    if (static_cast<int>(s.window.size()) >= StartWindow(p.method, p.start)) StartSeries(p, s);
    out.stats = s.stats;
    out.active = s.active;
    return;
  }
  Constants c = EffectiveConstants(p, s);
  const std::optional<double> f = ForecastNext(p.method, c, s.model, index);
  if (!f) {
    UpdateModel(p.method, c, s.model, index, y);
    out.stats = s.stats;
    out.active = s.active;
    return;
  }
  const double e = y - *f;
  const double mad_before = s.stats.mad;
  out.has_forecast = true;
  out.forecast = *f;
  out.error = e;
  if (mad_before > 0.0) {
    const double hw = IntervalHalfWidth(p.coverage, mad_before);
    out.lower = *f - hw;
    out.upper = *f + hw;
  }
  if (p.adaptive.enabled && p.adaptive.lagged)
    s.alpha = AdaptiveAlpha(p.adaptive, s.stats, s.alpha);
  UpdateErrorStats(s.stats, p.signal_beta, e);
  if (p.adaptive.enabled && !p.adaptive.lagged)
    s.alpha = AdaptiveAlpha(p.adaptive, s.stats, s.alpha);
  out.alpha = s.alpha;
  c.alpha = s.alpha;
  UpdateModel(p.method, c, s.model, index, y);
  out.stats = s.stats;
  s.forecasts += 1;
  if (mad_before > 0.0) out.spike = e / (kSigmaPerMad * mad_before);
  out.at_cap = p.adaptive.enabled && s.alpha >= p.adaptive.cap;
  if (const std::uint16_t cap = RecentCapacity(p)) s.recent.Push(cap, e, y, mad_before);
  if (s.forecasts > p.warmup) {
    out.trigg = TriggSignal(s.stats);
    out.cusum = CusumSignal(s.stats);
    const int age = SeriesAge(p, s) - 1;  // periods evaluated before this one
    for (std::size_t i = 0; i < p.rules.size(); ++i) {
      const RuleSpec& rule = p.rules[i];
      if (!StepSignal(rule.signal)) continue;
      Evaluate(rule, s, i, RuleValue(rule, out, s), out, age);
    }
  }
  out.active = s.active;
}

bool Finite(const SeriesState& s) {
  if (!std::isfinite(s.model.level) || !std::isfinite(s.model.trend)) return false;
  for (double v : s.model.season)
    if (!std::isfinite(v)) return false;
  return std::isfinite(s.stats.mad) && std::isfinite(s.stats.cusum);
}

}  // namespace

StepStatus Step(const PolicySpec& p, SeriesState& s, PeriodOrdinal period, double y,
                StepResult& out, std::string* problem) {
  if (const char* why = ActualProblem(p, y)) {
    if (problem) *problem = why;
    return StepStatus::kBadValue;
  }
  long gap = 0;
  if (s.seen) {
    const std::int64_t d = PeriodDistance(s.last_period, period);
    if (d < 1) {
      if (problem) *problem = "the period is not after the series' last period";
      return StepStatus::kNotLater;
    }
    gap = static_cast<long>(d - 1);
    if (gap > p.max_gap) {
      if (problem)
        *problem = std::to_string(gap) + " periods are missing before this one; max_gap is " +
                   std::to_string(p.max_gap);
      return StepStatus::kGapTooLong;
    }
  }
  SeriesState before;
  const bool risky = p.method == Method::kSeasonalMul;
  if (risky) before = s;

  // Episode changes of the gap periods and of the stale check add up into the step's result.
  std::uint64_t opened = 0, cleared = 0, ep_opened = 0, ep_escalated = 0, ep_resolved = 0;
  auto collect = [&] {
    opened |= out.opened;
    cleared |= out.cleared;
    ep_opened |= out.episodes_opened;
    ep_escalated |= out.episodes_escalated;
    ep_resolved |= out.episodes_resolved;
    out.opened = out.cleared = out.episodes_opened = out.episodes_escalated =
        out.episodes_resolved = 0;
  };
  out.opened = out.cleared = out.episodes_opened = out.episodes_escalated = out.episodes_resolved =
      0;
  if (s.seen && gap > 0) {
    // The series went `gap` periods past due: what the service's clock would have seen.
    CheckStale(p, s, gap, out);
    collect();
  }
  for (long g = 0; g < gap; ++g) {
    if (p.gaps == GapRule::kZero) {
      Observe(p, s, 0.0, out);
      collect();
    } else {
      if (s.started) CoastModel(p.method, EffectiveConstants(p, s), s.model);
      s.next_index += 1;
      s.missing += 1;
    }
  }
  s.seen = true;
  s.last_period = period;
  Observe(p, s, y, out);
  // the actual arrived: the series is not overdue any more
  CheckStale(p, s, 0, out);
  out.opened |= opened;
  out.cleared |= cleared;
  out.episodes_opened |= ep_opened;
  out.episodes_escalated |= ep_escalated;
  out.episodes_resolved |= ep_resolved;
  out.filled = gap;
  if (risky && !Finite(s)) {
    s = std::move(before);
    if (problem)
      *problem = "the multiplicative model became non-finite (level plus trend reached 0)";
    return StepStatus::kNonFinite;
  }
  return StepStatus::kOk;
}

bool MethodTakesNegative(Method m) {
  return !IsIntermittent(m) && m != Method::kSeasonalMul;
}

const char* ActualProblem(const PolicySpec& p, double y) {
  if (!std::isfinite(y)) return "the value is not a finite number";
  if (std::fabs(y) > kMaxActual)
    return "the value is beyond +/-1e15, the largest actual forewarden takes";
  if (y < 0 && !(p.accept_negative && MethodTakesNegative(p.method)))
    return MethodTakesNegative(p.method)
               ? "the value is negative and the policy refuses negative actuals "
                 "(negative_actuals: accept takes net sales with returns)"
               : "the value is negative and the policy's method cannot take negative actuals "
                 "(croston, sba and seasonal-mul)";
  return nullptr;
}

}  // namespace monitors
