// Parsing a batch of actuals from a request body or a dropped file, before the engine sees it.
//   CSV (text/csv): header with series, period and value (any order); every other column is
//     a label of the series (e.g. `channel`). RFC 4180 quoting.
//   NDJSON (application/x-ndjson): one object a line,
//     {"series": "...", "period": "2026-03-02", "value": 12, "labels": {"channel": "store"}}
// Problems name the line (1-based, as in the body) and the field; parsing goes on past a bad
// row so one reply lists up to 100 of them. Pure functions.
#pragma once

#include <string_view>
#include <vector>

#include "daemon/batch/rows.h"

namespace forewarden {

struct ParsedBatch {
  std::vector<IngestRow> rows;
  std::vector<RowProblem> problems;  // the first 100
  long problem_count = 0;
  long data_rows = 0;          // rows read (good and bad), for the metrics
  bool too_many_rows = false;  // more than max_rows: parsing stopped
};

// Bounds on what one row may bring (server settings); a row beyond them is a problem naming
// its line and field, like any bad row.
struct IngestLimits {
  long max_rows = 200000;
  std::size_t max_key_bytes = 256;
  std::size_t max_labels = 16;
  std::size_t max_label_bytes = 256;  // a label's name and its value, each
};

ParsedBatch ParseCsvBatch(std::string_view body, const IngestLimits& limits);
ParsedBatch ParseNdjsonBatch(std::string_view body, const IngestLimits& limits);

}  // namespace forewarden
