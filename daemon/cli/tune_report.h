// The HTML report of `forewarden tune`: one self-contained file (the chart library, Debian's
// dygraphs compiled into the binary, is written into it), a chart per policy of accuracy (MASE)
// against alert rate for every candidate with the chosen one and the current settings marked,
// and the table of candidates. Opens from disk in any browser, with no network.
#pragma once

#include <string>
#include <vector>

namespace forewarden {

struct ReportPoint {
  std::string label;  // the candidate's constants, e.g. "alpha 0.2, adaptive off"
  double rate = 0;    // alerts (or false alerts) per 1,000 series-periods
  double mase = 0;    // NaN when the policy's series have no naive scale
  double mae = 0;
  double caught = -1;  // share of changes caught within 13 periods; < 0: no truth file
  bool eligible = false, chosen = false, current = false;
  std::string problem;  // why the candidate could not run ("" when it ran)
};

struct ReportPolicy {
  std::string name, method;
  long series = 0, actuals = 0;
  std::string rate_name;  // "alerts" or "false alerts"
  double ceiling = 0;     // the rate a candidate may reach to be chosen
  std::string change;     // what the recommendation changes ("" = nothing)
  std::vector<ReportPoint> points;
};

std::string TuneReportHtml(const std::string& heading, const std::vector<ReportPolicy>& policies);

}  // namespace forewarden
