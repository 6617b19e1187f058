// Reading an actuals history (CSV: series, period, value, labels) through the monitoring step,
// one row at a time. `replay` and `tune` both read their input through this one reader, so a
// history is refused by both with the same words: the first problem stops the read, naming its
// line and field. Series are kept in first-seen order with their state as the input's policy
// steps them. Single-threaded.
#pragma once

#include <cstddef>
#include <deque>
#include <memory>
#include <string>
#include <string_view>
#include <vector>

#include "config/settings.h"
#include "daemon/common/status.h"
#include "monitors/series.h"

namespace forewarden {

// A parsed period with its normalised text (the ISO date of its first day).
struct ParsedPeriod {
  monitors::PeriodParse parse;
  char text[10];
  std::string_view view() const { return {text, sizeof text}; }
};

struct HistorySeries {
  std::string_view key;  // stable for the reader's lifetime
  const config::Policy* policy = nullptr;
  std::size_t index = 0;  // first-seen order: 0, 1, 2, ...
  monitors::SeriesState state;
  HistorySeries* next_seen = nullptr;  // the series whose row followed this one's last time
};

// One row read and stepped.
struct HistoryRow {
  HistorySeries* series = nullptr;
  const ParsedPeriod* period = nullptr;  // stable for the reader's lifetime
  double value = 0.0;
  long line = 0;
  double mad_before = 0.0;  // the series' MAD before this row was applied
};

class HistoryReader {
 public:
  // `input`: a file path, "-" for standard input. `settings` must outlive the reader.
  HistoryReader(const config::Settings& settings, const std::string& input);
  ~HistoryReader();
  HistoryReader(const HistoryReader&) = delete;
  HistoryReader& operator=(const HistoryReader&) = delete;

  // Reads the header: io when the input cannot be read, invalid when the header is wrong.
  Status Open();
  // Reads the next row and applies it with the series' policy (monitors::Step, its result in
  // `result`): true with `row` set, false at the end of the input. On a problem the state of
  // every series is as before the row.
  Result<bool> Next(HistoryRow& row, monitors::StepResult& result);

  std::size_t series_count() const;
  // The series with this key, or null when the history has none.
  const HistorySeries* Find(std::string_view key) const;
  // The series in first-seen order (index i is the series with `index` i).
  const std::deque<HistorySeries>& series() const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace forewarden
