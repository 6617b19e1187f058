// The diagnosis of an alert: what a series' recent actuals and forecasts say about the change
// that set it off. Pure: values in, values out.
//
// A one-off first: when the period the alert opened in is beyond 3 sigma from its forecast, the
// period before it was within 1.5 sigma of its own, and the periods after it (if any) are back
// within 1.5 sigma of that forecast on average, the change is a spike that began there. Otherwise
// the change's start: over the newest n periods (oldest first) with actuals y and the forecasts f
// fixed before each, for every candidate start k the actuals from k on are compared with the level
// the series had before k (its forecast f[k], made before k's actual). The start is the k that
// maximises (sum_{i>=k} (y_i - f_k))^2 / (n - k): the maximum-likelihood change point for a mean
// that moves from a known level to an unknown constant at k, with normal noise of constant variance
// (Hinkley 1970; Page 1954 for the cumulative-sum form). The later k wins a tie.
//
// The kind, from the deviations d_i = y_i - f_k since the start, their count m and the noise
// sigma (1.2533 x the MAD before the start):
//   spike          the first deviation beyond 3 sigma and the rest (if any) within 1.5 sigma on
//                  average (with m = 1 this is "so far": one period cannot tell a spike from the
//                  start of a step)
//   trend          m >= 4 and a least-squares slope of d over time with |t| > 3 and the fitted
//                  line moving more than 2 sigma over the m periods
//   noise grown    |mean d| under 2 sigma / sqrt(m) but the root mean square of d over 1.5 sigma
//   step up/down   otherwise, by the sign of mean d
//   pattern        intermittent methods, with 4 periods or more on each side of the start: the
//                  share of periods with demand since differs from the share before by more
//                  than 0.3 (otherwise as above)
// The level since the change: the mean actual since the start (for a trend, the fitted line's
// value at the newest period), with an interval of +/- z sqrt(s^2 / m) at the policy's coverage,
// s the larger of sigma and the standard deviation of d. These rules of thumb are ours (common
// practice in spirit: 3 sigma for an outlier, |t| > 3 for a slope), tuned on invented changes
// (README, "Diagnosis benchmark").
#pragma once

#include <cstddef>
#include <string>
#include <vector>

#include "monitors/period.h"

namespace monitors {

enum class ChangeKind { kStepUp, kStepDown, kTrendUp, kTrendDown, kSpike, kNoiseGrown, kPattern };
const char* ChangeKindName(ChangeKind kind);  // "step-up", "step-down", "trend-up", ...

enum class SuggestedAction { kRelevel, kRaiseAlpha, kNothing, kReview };
const char* SuggestedActionName(SuggestedAction action);  // "re-level", "raise-alpha", ...

struct Diagnosis {
  bool ok = false;  // false: too little to go on (fewer than 2 periods with a forecast)
  int began = 0;    // periods before the newest one at which the change began (0: the newest)
  ChangeKind kind = ChangeKind::kStepUp;
  double level = 0, lower = 0, upper = 0;  // the level since the change and its interval
  double before = 0;                       // the level before it (the forecast at the start)
  SuggestedAction action = SuggestedAction::kReview;
  std::string advice;  // the action in words, e.g. "re-level to 42.5"
};

// The newest periods of one series: the period, its actual, the forecast fixed before it (NaN:
// none) and the MAD before its update, at most `capacity` of them (a ring).
class RecentPeriods {
 public:
  explicit RecentPeriods(std::size_t capacity = 26) : cap_(capacity) {}
  void Push(PeriodOrdinal period, double actual, double forecast, double mad_before);
  std::size_t size() const { return count_; }
  // Oldest first.
  void Copy(std::vector<PeriodOrdinal>& period, std::vector<double>& actual,
            std::vector<double>& forecast, std::vector<double>& mad) const;

 private:
  struct Entry {
    PeriodOrdinal period;
    double actual, forecast, mad;
  };
  std::size_t cap_, head_ = 0, count_ = 0;
  std::vector<Entry> v_;
};

// `actual`, `forecast`, `mad` oldest first (as RecentPeriods::Copy gives them); `coverage` the
// policy's interval coverage. The change is looked for at or before index `latest_start` (the
// period the alert opened: a change cannot begin after the alert it set off).
Diagnosis Diagnose(const std::vector<double>& actual, const std::vector<double>& forecast,
                   const std::vector<double>& mad, bool intermittent, double coverage,
                   std::size_t latest_start = static_cast<std::size_t>(-1));

// How the service and replay diagnose an alert: from a series' periods (oldest first, any
// number: replay's ring, the service's retained history), the newest kDiagnosisWindow of those
// no later than kDiagnosisPeriods after the alert opened, the change looked for at or before
// the opening period. `began` is the period the change began (when the diagnosis is ok).
inline constexpr std::size_t kDiagnosisWindow = 26;
inline constexpr PeriodOrdinal kDiagnosisPeriods = 8;
struct AlertDiagnosis {
  Diagnosis diagnosis;
  PeriodOrdinal began = 0;
};
AlertDiagnosis DiagnoseAlert(const std::vector<PeriodOrdinal>& period,
                             const std::vector<double>& actual, const std::vector<double>& forecast,
                             const std::vector<double>& mad, PeriodOrdinal opened,
                             bool intermittent, double coverage);

}  // namespace monitors
