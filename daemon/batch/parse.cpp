#include "daemon/batch/parse.h"

#include <charconv>
#include <cmath>
#include <nlohmann/json.hpp>

#include "daemon/common/csv.h"
#include "daemon/common/key_text.h"
#include "daemon/common/parse_number.h"
#include "monitors/period.h"

namespace forewarden {

std::string LabelsJson(const Labels& labels) {
  nlohmann::json j = nlohmann::json::object();
  for (const auto& [name, value] : labels) j[name] = value;
  return j.dump(-1, ' ', false, nlohmann::json::error_handler_t::replace);
}
namespace {

constexpr std::size_t kMaxProblems = 100;

void Add(ParsedBatch& b, long line, const char* field, std::string message) {
  ++b.problem_count;
  if (b.problems.size() < kMaxProblems) b.problems.push_back({line, field, std::move(message)});
}

// A period must read as a date, an ISO week or a month whatever the policy (which is only
// known to the engine): catches impossible dates early, so one reply lists every problem.
bool CheckPeriod(ParsedBatch& b, long line, const std::string& text) {
  using monitors::PeriodKind;
  const PeriodKind kind = text.size() == 8 && (text[5] == 'W' || text[5] == 'w') ? PeriodKind::kWeek
                          : text.size() == 7 ? PeriodKind::kMonth
                                             : PeriodKind::kDay;
  const monitors::PeriodParse p = monitors::ParsePeriod(kind, text);
  if (p.ok()) return true;
  Add(b, line, "period", p.error);
  return false;
}

}  // namespace

// The per-row bounds; false (with a problem) when the row breaks one.
bool WithinLimits(ParsedBatch& b, long line, const IngestRow& row, const IngestLimits& limits) {
  bool ok = true;
  if (std::string why = KeyTextProblem(row.series); !why.empty()) {
    Add(b, line, "series", "the series key holds " + why);
    ok = false;
  }
  for (const auto& [name, value] : row.labels) {
    std::string why = KeyTextProblem(name);
    if (why.empty()) why = KeyTextProblem(value);
    if (!why.empty()) {
      Add(b, line, "labels", "label '" + name.substr(0, 40) + "' holds " + why);
      ok = false;
      break;
    }
  }
  if (row.series.size() > limits.max_key_bytes) {
    Add(b, line, "series",
        "the series key is " + std::to_string(row.series.size()) +
            " bytes; server.max_key_bytes is " + std::to_string(limits.max_key_bytes));
    ok = false;
  }
  if (row.labels.size() > limits.max_labels) {
    Add(b, line, "labels",
        std::to_string(row.labels.size()) + " labels; server.max_labels is " +
            std::to_string(limits.max_labels));
    ok = false;
  }
  for (const auto& [name, value] : row.labels)
    if (name.size() > limits.max_label_bytes || value.size() > limits.max_label_bytes) {
      Add(b, line, "labels",
          "label '" + name.substr(0, 40) + "' is longer than server.max_label_bytes (" +
              std::to_string(limits.max_label_bytes) + ")");
      ok = false;
      break;
    }
  return ok;
}

ParsedBatch ParseCsvBatch(std::string_view body, const IngestLimits& limits) {
  const long max_rows = limits.max_rows;
  ParsedBatch b;
  CsvReader in(CsvReader::FromText{}, body);
  std::vector<std::string_view> fields;
  if (!in.Next(fields)) {
    Add(b, 1, "header",
        in.ok() ? "the body is empty: expected a header series,period,value" : in.error());
    return b;
  }
  const ActualsHeader header = ReadActualsHeader(fields);
  for (const std::string& p : header.problems) Add(b, in.line(), "header", p);
  const int c_series = header.series, c_period = header.period, c_value = header.value;
  std::vector<std::string> names = header.labels;
  if (b.problem_count) return b;
  while (in.Next(fields)) {
    const long line = in.line();
    if (static_cast<long>(b.rows.size()) >= max_rows) {
      b.too_many_rows = true;
      return b;
    }
    if (fields.size() != names.size()) {
      Add(b, line, "row",
          "expected " + std::to_string(names.size()) + " fields, found " +
              std::to_string(fields.size()));
      continue;
    }
    IngestRow row;
    row.line = line;
    row.series.assign(fields[c_series]);
    row.period.assign(fields[c_period]);
    bool ok = true;
    if (row.series.empty()) {
      Add(b, line, "series", "the series key is empty");
      ok = false;
    }
    if (row.period.empty()) {
      Add(b, line, "period", "the period is empty");
      ok = false;
    } else if (!CheckPeriod(b, line, row.period)) {
      ok = false;
    }
    if (!ParseNumber(fields[c_value], row.value)) {
      Add(b, line, "value", "'" + std::string(fields[c_value]) + "' is not a finite number");
      ok = false;
    }
    for (std::size_t i = 0; i < names.size(); ++i)
      if (static_cast<int>(i) != c_series && static_cast<int>(i) != c_period &&
          static_cast<int>(i) != c_value && !fields[i].empty())
        row.labels.emplace_back(names[i], std::string(fields[i]));
    ++b.data_rows;
    if (ok) ok = WithinLimits(b, line, row, limits);
    if (ok) b.rows.push_back(std::move(row));
  }
  if (!in.ok()) Add(b, in.line(), "row", in.error());
  return b;
}

ParsedBatch ParseNdjsonBatch(std::string_view body, const IngestLimits& limits) {
  const long max_rows = limits.max_rows;
  ParsedBatch b;
  long line = 0;
  std::size_t pos = 0;
  while (pos < body.size()) {
    std::size_t nl = body.find('\n', pos);
    if (nl == std::string_view::npos) nl = body.size();
    std::string_view text = body.substr(pos, nl - pos);
    pos = nl + 1;
    ++line;
    if (!text.empty() && text.back() == '\r') text.remove_suffix(1);
    if (text.find_first_not_of(" \t") == std::string_view::npos) continue;
    if (static_cast<long>(b.rows.size()) >= max_rows) {
      b.too_many_rows = true;
      return b;
    }
    nlohmann::json j = nlohmann::json::parse(text, nullptr, false);
    if (j.is_discarded() || !j.is_object()) {
      Add(b, line, "json", "not a JSON object");
      continue;
    }
    IngestRow row;
    row.line = line;
    bool ok = true;
    for (const auto& [key, val] : j.items())
      if (key != "series" && key != "period" && key != "value" && key != "labels") {
        Add(b, line, "json", "unknown field '" + key + "'");
        ok = false;
      }
    auto text_field = [&](const char* name, std::string& out) {
      auto it = j.find(name);
      if (it == j.end() || !it->is_string()) {
        Add(b, line, name, it == j.end() ? "missing" : "must be a string");
        return false;
      }
      out = it->get<std::string>();
      if (out.empty()) {
        Add(b, line, name,
            std::string("the ") + name + (std::string(name) == "series" ? " key" : "") +
                " is empty");
        return false;
      }
      return true;
    };
    ok &= text_field("series", row.series);
    if (text_field("period", row.period)) {
      ok &= CheckPeriod(b, line, row.period);
    } else {
      ok = false;
    }
    auto v = j.find("value");
    if (v == j.end()) {
      Add(b, line, "value", "missing");
      ok = false;
    } else if (!v->is_number()) {
      Add(b, line, "value", "must be a number");
      ok = false;
    } else {
      row.value = v->get<double>();
      if (!std::isfinite(row.value)) {
        Add(b, line, "value", "not a finite number");
        ok = false;
      }
    }
    auto labels = j.find("labels");
    if (labels != j.end()) {
      if (!labels->is_object()) {
        Add(b, line, "labels", "must be an object of strings");
        ok = false;
      } else {
        for (const auto& [k, lv] : labels->items()) {
          if (!lv.is_string()) {
            Add(b, line, "labels", "label '" + k + "' must be a string");
            ok = false;
            continue;
          }
          row.labels.emplace_back(k, lv.get<std::string>());
        }
      }
    }
    ++b.data_rows;
    if (ok) ok = WithinLimits(b, line, row, limits);
    if (ok) b.rows.push_back(std::move(row));
  }
  return b;
}

}  // namespace forewarden
