#include "daemon/cli/tune_report.h"

#include <cmath>

#include "daemon/common/text_out.h"
#include "daemon/web/assets.h"

namespace forewarden {

namespace {

void Html(TextOut& out, std::string_view s) {
  for (char c : s) {
    switch (c) {
      case '&':
        out.Put("&amp;");
        break;
      case '<':
        out.Put("&lt;");
        break;
      case '>':
        out.Put("&gt;");
        break;
      case '"':
        out.Put("&quot;");
        break;
      default:
        out.Put(c);
    }
  }
}

// A JSON number, or null for NaN (JSON has no NaN).
void JsonNumber(TextOut& out, double v) {
  if (std::isnan(v) || std::isinf(v))
    out.Put("null");
  else
    out.Number(v);
}

// JSON inside <script>: "</" would end the element early; "<\/" is the same JSON text.
std::string JsonInScript(std::string_view s) {
  std::string r;
  r.reserve(s.size());
  for (std::size_t i = 0; i < s.size(); ++i) {
    if (s[i] == '<' && i + 1 < s.size() && s[i + 1] == '/') {
      r += "<\\/";
      ++i;
    } else {
      r += s[i];
    }
  }
  return r;
}

std::string Cell(double v, const char* fmt) {
  if (std::isnan(v)) return "-";
  char b[64];
  std::snprintf(b, sizeof b, fmt, v);
  return b;
}

constexpr const char* kStyle = R"css(
body { font: 15px/1.45 system-ui, sans-serif; margin: 0; color: #1d2430; background: #f6f5f1; }
header { background: #24415c; color: #fff; padding: 14px 24px; }
header h1 { font-size: 20px; margin: 0 0 4px; }
main { padding: 8px 24px 40px; max-width: 1100px; }
section { background: #fff; border: 1px solid #d8d4c8; border-radius: 6px; padding: 14px 18px; margin: 18px 0; }
h2 { font-size: 17px; margin: 0 0 6px; }
.chart { height: 320px; margin: 10px 0; }
.key span { display: inline-block; margin-right: 16px; }
.dot { display: inline-block; width: 10px; height: 10px; border-radius: 50%; margin-right: 5px; vertical-align: middle; }
table { border-collapse: collapse; width: 100%; font-size: 13px; }
th, td { text-align: right; padding: 3px 8px; border-bottom: 1px solid #ebe8df; }
th:first-child, td:first-child { text-align: left; }
tr.chosen td { background: #fbe7d9; font-weight: 600; }
tr.current td:first-child::after { content: " (now)"; color: #4b5563; }
tr.out td { color: #5b6270; }
.note { color: #414a57; }
)css";

// Draws one scatter chart per policy from the JSON data block (dygraphs needs rows sorted by x;
// each kind of candidate is its own column so that it takes its own colour and size).
constexpr const char* kScript = R"js(
(function () {
  var data = JSON.parse(document.getElementById('tune-data').textContent);
  data.forEach(function (p, k) {
    var rows = [];
    p.points.forEach(function (pt) {
      if (pt.rate === null || pt.mase === null) return;
      var row = [pt.rate, null, null, null, null];
      var col = pt.chosen ? 3 : (pt.current ? 4 : (pt.eligible ? 2 : 1));
      row[col] = pt.mase;
      rows.push(row);
    });
    rows.sort(function (a, b) { return a[0] - b[0]; });
    var el = document.getElementById('chart-' + k);
    el.setAttribute('data-points', String(rows.length));
    if (!rows.length) { el.textContent = 'No candidate has both figures to plot.'; return; }
    new Dygraph(el, rows, {
      labels: [p.rate_name + ' per 1,000 series-periods', 'over the ceiling', 'within the ceiling', 'chosen', 'now'],
      drawPoints: true, strokeWidth: 0, pointSize: 3, highlightCircleSize: 5,
      series: { 'chosen': { pointSize: 7 }, 'now': { pointSize: 5 } },
      colors: ['#9aa3ad', '#2f7d6d', '#c2541a', '#24415c'],
      xlabel: p.rate_name + ' per 1,000 series-periods', ylabel: 'MASE (lower is better)',
      legend: 'never', connectSeparatedPoints: false, xRangePad: 12, yRangePad: 12,
      underlayCallback: function (ctx, area, g) {
        var x = g.toDomXCoord(p.ceiling);
        ctx.save(); ctx.strokeStyle = '#8a5a00'; ctx.setLineDash([5, 4]);
        ctx.beginPath(); ctx.moveTo(x, area.y); ctx.lineTo(x, area.y + area.h); ctx.stroke();
        ctx.restore();
      }
    });
  });
  document.getElementById('main').setAttribute('data-ready', 'report');
})();
)js";

}  // namespace

std::string TuneReportHtml(const std::string& heading, const std::vector<ReportPolicy>& policies) {
  TextOut out(nullptr);
  out.Put(
      "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\n"
      "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
      "<title>forewarden tune report</title>\n<style>");
  if (const PageFile* css = FindPageFile("dygraph.min.css")) out.Put(css->body);
  out.Put(kStyle);
  out.Put("</style>\n</head><body>\n<header><h1>Tuning report</h1><div>");
  Html(out, heading);
  out.Put(
      "</div></header>\n<main id=\"main\">\n<p class=\"note\">Each point is one candidate setting "
      "of a "
      "policy, run over the same history with the service's own step and rules. Lower is "
      "more accurate (MASE: mean absolute error over that of the naive forecast); further "
      "left raises fewer alerts. The dashed line is the ceiling on the alert rate: the "
      "chosen candidate is the most accurate one left of it. Signals are advisory, and so "
      "is this recommendation: check it against what you know of the series.</p>\n"
      "<p class=\"key\"><span><i class=\"dot\" style=\"background:#c2541a\"></i>chosen</span>"
      "<span><i class=\"dot\" style=\"background:#24415c\"></i>now</span>"
      "<span><i class=\"dot\" style=\"background:#2f7d6d\"></i>within the ceiling</span>"
      "<span><i class=\"dot\" style=\"background:#9aa3ad\"></i>over the ceiling</span></p>\n");
  for (std::size_t k = 0; k < policies.size(); ++k) {
    const ReportPolicy& p = policies[k];
    out.Put("<section><h2>");
    Html(out, p.name);
    out.Put(" <small>(");
    Html(out, p.method);
    out.Put(", ");
    out.Integer(p.series);
    out.Put(" series, ");
    out.Integer(p.actuals);
    out.Put(" actuals)</small></h2>\n<p>");
    if (p.change.empty()) {
      out.Put("Recommendation: keep the settings as they are.");
    } else {
      out.Put("Recommendation: ");
      Html(out, p.change);
      out.Put(".");
    }
    out.Put(" Ceiling: ");
    out.Put(Cell(p.ceiling, "%.3g"));
    out.Put(" ");
    Html(out, p.rate_name);
    out.Put(" per 1,000 series-periods.</p>\n<div class=\"chart\" id=\"chart-");
    out.Integer(static_cast<long long>(k));
    out.Put("\" role=\"img\" aria-label=\"MASE against ");
    Html(out, p.rate_name);
    out.Put(" for every candidate of ");
    Html(out, p.name);
    out.Put("\"></div>\n<table><thead><tr><th>candidate</th><th>MASE</th><th>MAE</th><th>");
    Html(out, p.rate_name);
    out.Put(" / 1,000</th>");
    const bool truth = !p.points.empty() && p.points.front().caught >= 0;
    if (truth) out.Put("<th>changes caught</th>");
    out.Put("</tr></thead><tbody>\n");
    for (const ReportPoint& pt : p.points) {
      out.Put("<tr class=\"");
      out.Put(pt.chosen ? "chosen" : (pt.eligible ? "" : "out"));
      if (pt.current) out.Put(" current");
      out.Put("\"><td>");
      Html(out, pt.label);
      if (!pt.problem.empty()) {
        out.Put(" &mdash; did not run: ");
        Html(out, pt.problem);
      }
      out.Put("</td><td>");
      out.Put(Cell(pt.mase, "%.4f"));
      out.Put("</td><td>");
      out.Put(Cell(pt.mae, "%.3f"));
      out.Put("</td><td>");
      out.Put(Cell(pt.rate, "%.3f"));
      out.Put("</td>");
      if (truth) {
        out.Put("<td>");
        out.Put(Cell(100 * pt.caught, "%.0f %%"));
        out.Put("</td>");
      }
      out.Put("</tr>\n");
    }
    out.Put("</tbody></table></section>\n");
  }
  out.Put("</main>\n<script type=\"application/json\" id=\"tune-data\">[");
  TextOut json(nullptr);
  for (std::size_t k = 0; k < policies.size(); ++k) {
    const ReportPolicy& p = policies[k];
    if (k) json.Put(',');
    json.Put("{\"name\":");
    json.JsonString(p.name);
    json.Put(",\"rate_name\":");
    json.JsonString(p.rate_name);
    json.Put(",\"ceiling\":");
    JsonNumber(json, p.ceiling);
    json.Put(",\"points\":[");
    for (std::size_t i = 0; i < p.points.size(); ++i) {
      const ReportPoint& pt = p.points[i];
      if (i) json.Put(',');
      json.Put("{\"rate\":");
      JsonNumber(json, pt.problem.empty() ? pt.rate : NAN);
      json.Put(",\"mase\":");
      JsonNumber(json, pt.problem.empty() ? pt.mase : NAN);
      json.Put(pt.chosen ? ",\"chosen\":true" : ",\"chosen\":false");
      json.Put(pt.current ? ",\"current\":true" : ",\"current\":false");
      json.Put(pt.eligible ? ",\"eligible\":true}" : ",\"eligible\":false}");
    }
    json.Put("]}");
  }
  out.Put(JsonInScript(json.View()));
  out.Put("]</script>\n<script>");
  // Debian's dygraphs holds no "</script" nor "<!--" (tested), so it goes in as it is.
  if (const PageFile* js = FindPageFile("dygraph.min.js")) out.Put(js->body);
  out.Put("</script>\n<script>");
  out.Put(kScript);
  out.Put("</script>\n</body></html>\n");
  return std::string(out.View());
}

}  // namespace forewarden
