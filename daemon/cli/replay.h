// `forewarden replay`: runs an actuals CSV through the monitoring engine and writes one output
// row per input row (ARCHITECTURE.md, "The replay contract"). Memory grows with the number of
// series, not rows.
#pragma once

#include <iosfwd>
#include <map>
#include <string>

#include "config/settings.h"
#include "daemon/common/status.h"

namespace forewarden {

struct ReplayOptions {
  std::string input;   // "-" = standard input
  std::string output;  // empty or "-" = standard output; a file is written under a temporary
                       // name and renamed into place only when the whole replay succeeded
  std::string alerts;  // if set: one CSV row per alert episode (series, policy, rule, severity,
                       // opened, escalated, resolved periods), written the same way
  int horizon = 0;     // if > 0: columns ahead_1..ahead_H, the forecasts made after each row's
                       // actual for the next H periods (monitors/ahead.h)
};

struct ReplaySummary {
  long series = 0;
  long actuals = 0;
  double seconds = 0.0;
  std::map<std::string, long> alerts_opened;  // "policy/rule" -> alert episodes opened
};

// The summary; invalid on bad input (the message names the line and field), io when a file
// cannot be read or written.
Result<ReplaySummary> RunReplay(const config::Settings& settings, const ReplayOptions& options);

// The summary lines written to standard error.
std::string FormatReplaySummary(const ReplaySummary& summary);

}  // namespace forewarden
