#include "monitors/diagnosis.h"

#include <algorithm>
#include <cmath>
#include <cstdio>

#include "monitors/interval.h"

namespace monitors {

const char* ChangeKindName(ChangeKind kind) {
  switch (kind) {
    case ChangeKind::kStepUp:
      return "step-up";
    case ChangeKind::kStepDown:
      return "step-down";
    case ChangeKind::kTrendUp:
      return "trend-up";
    case ChangeKind::kTrendDown:
      return "trend-down";
    case ChangeKind::kSpike:
      return "spike";
    case ChangeKind::kNoiseGrown:
      return "noise-grown";
    case ChangeKind::kPattern:
      return "pattern-changed";
  }
  return "?";
}

const char* SuggestedActionName(SuggestedAction action) {
  switch (action) {
    case SuggestedAction::kRelevel:
      return "re-level";
    case SuggestedAction::kRaiseAlpha:
      return "raise-alpha";
    case SuggestedAction::kNothing:
      return "nothing";
    case SuggestedAction::kReview:
      return "review";
  }
  return "?";
}

void RecentPeriods::Push(PeriodOrdinal period, double actual, double forecast, double mad_before) {
  if (cap_ == 0) return;
  if (v_.empty()) v_.resize(cap_);
  v_[head_] = Entry{period, actual, forecast, mad_before};
  head_ = head_ + 1 == cap_ ? 0 : head_ + 1;
  if (count_ < cap_) ++count_;
}

void RecentPeriods::Copy(std::vector<PeriodOrdinal>& period, std::vector<double>& actual,
                         std::vector<double>& forecast, std::vector<double>& mad) const {
  period.clear();
  actual.clear();
  forecast.clear();
  mad.clear();
  std::size_t i = (head_ + cap_ - count_) % (cap_ ? cap_ : 1);
  for (std::size_t k = 0; k < count_; ++k) {
    const Entry& e = v_[i];
    period.push_back(e.period);
    actual.push_back(e.actual);
    forecast.push_back(e.forecast);
    mad.push_back(e.mad);
    i = i + 1 == cap_ ? 0 : i + 1;
  }
}

namespace {

std::string Number(double v) {
  char b[32];
  std::snprintf(b, sizeof b, "%.6g", v);
  return b;
}

}  // namespace

Diagnosis Diagnose(const std::vector<double>& y, const std::vector<double>& f,
                   const std::vector<double>& mad, bool intermittent, double coverage,
                   std::size_t latest_start) {
  Diagnosis d;
  const std::size_t n = std::min({y.size(), f.size(), mad.size()});
  // A one-off at the period the alert opened comes first: one outlier would otherwise dominate
  // the mean-shift statistic below and drag the start back to any run of noise before it.
  std::size_t best = n;
  const std::size_t opened = std::min(latest_start, n == 0 ? 0 : n - 1);
  if (n > 0 && std::isfinite(f[opened]) && mad[opened] > 0) {
    const double s = kSigmaPerMad * mad[opened];
    double rest = 0;
    for (std::size_t i = opened + 1; i < n; ++i) rest += std::fabs(y[i] - f[opened]);
    if (opened + 1 < n) rest /= static_cast<double>(n - opened - 1);
    // ...and the period before it was not already off: that would be a step under way
    const bool before_calm = opened == 0 || !std::isfinite(f[opened - 1]) ||
                             std::fabs(y[opened - 1] - f[opened - 1]) < 1.5 * s;
    if (std::fabs(y[opened] - f[opened]) > 3 * s && rest < 1.5 * s && before_calm) best = opened;
  }
  // The start: the candidate k (with a forecast) maximising (sum of y_i - f_k, i >= k)^2 / m.
  double best_t = -1.0;
  for (std::size_t k = 0; k < n && k <= latest_start && best != opened; ++k) {
    if (!std::isfinite(f[k])) continue;
    double sum = 0;
    for (std::size_t i = k; i < n; ++i) sum += y[i] - f[k];
    const double t = sum * sum / static_cast<double>(n - k);
    if (t >= best_t) {
      best_t = t;
      best = k;
    }
  }
  std::size_t with_forecast = 0;
  for (std::size_t i = 0; i < n; ++i) with_forecast += std::isfinite(f[i]) ? 1 : 0;
  if (best == n || with_forecast < 2) return d;
  const std::size_t k = best, m = n - k;
  const double base = f[k];
  double sigma = kSigmaPerMad * mad[k];
  double sum = 0, sq = 0;
  for (std::size_t i = k; i < n; ++i) {
    sum += y[i] - base;
    sq += (y[i] - base) * (y[i] - base);
  }
  const double mean = sum / static_cast<double>(m);
  const double rms = std::sqrt(sq / static_cast<double>(m));
  double sd = 0;
  if (m >= 2) {
    double v = 0;
    for (std::size_t i = k; i < n; ++i) v += (y[i] - base - mean) * (y[i] - base - mean);
    sd = std::sqrt(v / static_cast<double>(m - 1));
  }
  if (!(sigma > 0)) sigma = sd > 0 ? sd : std::max(1e-12, std::fabs(mean));
  d.ok = true;
  d.began = static_cast<int>(m - 1);
  d.before = base;
  d.level = base + mean;

  // the slope of the deviations over the periods since the start
  double slope = 0, slope_t = 0;
  if (m >= 4) {
    const double tbar = static_cast<double>(m - 1) / 2.0;
    double sxx = 0, sxy = 0;
    for (std::size_t i = 0; i < m; ++i) {
      const double t = static_cast<double>(i) - tbar;
      sxx += t * t;
      sxy += t * (y[k + i] - base - mean);
    }
    slope = sxy / sxx;
    double rss = 0;
    for (std::size_t i = 0; i < m; ++i) {
      const double fit = mean + slope * (static_cast<double>(i) - tbar);
      rss += (y[k + i] - base - fit) * (y[k + i] - base - fit);
    }
    const double se = std::sqrt(rss / static_cast<double>(m - 2) / sxx);
    slope_t = se > 0 ? slope / se : (slope != 0 ? 1e9 : 0);
  }
  double rest = 0;  // mean |d| after the first period since the start
  for (std::size_t i = k + 1; i < n; ++i) rest += std::fabs(y[i] - base);
  if (m >= 2) rest /= static_cast<double>(m - 1);
  const double first = y[k] - base;

  double share_before = -1, share_since = -1;
  if (intermittent && k >= 4) {
    std::size_t on = 0;
    for (std::size_t i = 0; i < k; ++i) on += y[i] > 0 ? 1 : 0;
    share_before = static_cast<double>(on) / static_cast<double>(k);
    on = 0;
    for (std::size_t i = k; i < n; ++i) on += y[i] > 0 ? 1 : 0;
    share_since = static_cast<double>(on) / static_cast<double>(m);
  }

  if (share_before >= 0 && m >= 4 && std::fabs(share_since - share_before) > 0.3) {
    d.kind = ChangeKind::kPattern;
  } else if (std::fabs(first) > 3 * sigma && (m == 1 || rest < 1.5 * sigma)) {
    d.kind = ChangeKind::kSpike;
  } else if (m >= 4 && std::fabs(slope_t) > 3 &&
             std::fabs(slope) * static_cast<double>(m - 1) > 2 * sigma) {
    d.kind = slope > 0 ? ChangeKind::kTrendUp : ChangeKind::kTrendDown;
    d.level = base + mean + slope * static_cast<double>(m - 1) / 2.0;
  } else if (std::fabs(mean) < 2 * sigma / std::sqrt(static_cast<double>(m)) && rms > 1.5 * sigma) {
    d.kind = ChangeKind::kNoiseGrown;
  } else {
    d.kind = mean >= 0 ? ChangeKind::kStepUp : ChangeKind::kStepDown;
  }
  const double z = NormalQuantile(0.5 + coverage / 2.0);
  const double s = std::max(sigma, sd);
  const double half = z * s / std::sqrt(static_cast<double>(m));
  d.lower = d.level - half;
  d.upper = d.level + half;
  if (d.kind == ChangeKind::kSpike) {
    // the level the one-off leaves behind: the level before it, from the periods after it
    d.level = m >= 2 ? base + (sum - first) / static_cast<double>(m - 1) : base;
    const double h = z * sigma / std::sqrt(static_cast<double>(m >= 2 ? m - 1 : 1));
    d.lower = d.level - h;
    d.upper = d.level + h;
  }
  switch (d.kind) {
    case ChangeKind::kStepUp:
    case ChangeKind::kStepDown:
      d.action = SuggestedAction::kRelevel;
      d.advice = "re-level to " + Number(d.level);
      break;
    case ChangeKind::kTrendUp:
    case ChangeKind::kTrendDown:
      d.action = SuggestedAction::kRaiseAlpha;
      d.advice =
          "raise the smoothing constant, or forecast with a trend method; the level is "
          "near " +
          Number(d.level) + " now";
      break;
    case ChangeKind::kSpike:
      d.action = SuggestedAction::kNothing;
      d.advice = m == 1 ? "nothing yet: a one-off unless the next periods stay near " + Number(y[k])
                        : "nothing: a one-off";
      break;
    case ChangeKind::kNoiseGrown:
      d.action = SuggestedAction::kReview;
      d.advice = "review: the errors have grown but the level has not moved";
      break;
    case ChangeKind::kPattern: {
      d.action = SuggestedAction::kReview;
      char b[160];
      std::snprintf(b, sizeof b,
                    "review: the demand pattern changed (periods with demand %.0f %% before, "
                    "%.0f %% since)",
                    100 * share_before, 100 * share_since);
      d.advice = b;
      break;
    }
  }
  return d;
}

AlertDiagnosis DiagnoseAlert(const std::vector<PeriodOrdinal>& period,
                             const std::vector<double>& actual, const std::vector<double>& forecast,
                             const std::vector<double>& mad, PeriodOrdinal opened,
                             bool intermittent, double coverage) {
  AlertDiagnosis out;
  const std::size_t n = std::min({period.size(), actual.size(), forecast.size(), mad.size()});
  std::size_t end = 0;  // one past the newest period to use
  while (end < n && period[end] <= opened + kDiagnosisPeriods) ++end;
  const std::size_t from = end > kDiagnosisWindow ? end - kDiagnosisWindow : 0;
  if (end == from) return out;
  std::size_t latest = 0;  // the opening period, relative to `from`
  while (from + latest + 1 < end && period[from + latest + 1] <= opened) ++latest;
  auto slice = [&](const std::vector<double>& v) {
    return std::vector<double>(v.begin() + static_cast<std::ptrdiff_t>(from),
                               v.begin() + static_cast<std::ptrdiff_t>(end));
  };
  out.diagnosis =
      Diagnose(slice(actual), slice(forecast), slice(mad), intermittent, coverage, latest);
  if (out.diagnosis.ok) out.began = period[end - 1 - static_cast<std::size_t>(out.diagnosis.began)];
  return out;
}

}  // namespace monitors
