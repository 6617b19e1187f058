// Streaming CSV input: reads a file (or standard input) in large blocks and hands out one
// record at a time as string_views into an internal buffer (valid until the next call).
// Fields follow RFC 4180: comma separated, optional double quotes with "" for a quote;
// a quoted field may not span lines. A trailing CR is dropped. Single-threaded.
#pragma once

#include <cstdio>
#include <memory>
#include <string>
#include <string_view>
#include <vector>

namespace forewarden {

// The header of an actuals CSV: the columns series, period and value in any order; every other
// named column is a label. `problems` lists what is wrong (empty: usable), in column order.
struct ActualsHeader {
  int series = -1, period = -1, value = -1;
  std::vector<std::string> labels;  // per column: the label name, "" for series/period/value
  std::vector<std::string> problems;
};
ActualsHeader ReadActualsHeader(const std::vector<std::string_view>& fields);

class CsvReader {
 public:
  // path "-" reads standard input. ok() is false (and error() says why) if it cannot open.
  explicit CsvReader(const std::string& path);
  // Reads from text in memory (copied).
  struct FromText {};
  CsvReader(FromText, std::string_view text);
  bool ok() const { return error_.empty(); }
  const std::string& error() const { return error_; }

  // Reads the next non-empty record into `fields`; false at end of input or on error
  // (then error() is set). line() is the 1-based line number of the record.
  bool Next(std::vector<std::string_view>& fields);
  long line() const { return line_; }

 private:
  bool NextLine(std::string_view& out);
  bool Split(std::string_view line, std::vector<std::string_view>& fields);

  struct FileCloser {
    void operator()(std::FILE* f) const {
      if (f && f != stdin) std::fclose(f);
    }
  };
  std::unique_ptr<std::FILE, FileCloser> file_;
  std::vector<char> buf_;
  std::size_t begin_ = 0, end_ = 0;
  bool eof_ = false;
  long line_ = 0;
  std::string error_;
  std::vector<std::string> unquoted_;  // storage for fields that needed unquoting
};

}  // namespace forewarden
