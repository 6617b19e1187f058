// A buffered writer for large text outputs (replay rows, simulated feeds) with fast number
// formatting: doubles in shortest round-trip form (std::to_chars), integers, periods.
// Writes to a FILE*; the caller owns the FILE. Single-threaded.
#pragma once

#include <charconv>
#include <cstdio>
#include <string>
#include <string_view>
#include <vector>

namespace forewarden {

class TextOut {
 public:
  explicit TextOut(std::FILE* f) : file_(f) { buf_.reserve(kFlushAt + 4096); }
  ~TextOut() { Flush(); }

  void Put(std::string_view s) {
    buf_.insert(buf_.end(), s.begin(), s.end());
    MaybeFlush();
  }
  void Put(char c) { buf_.push_back(c); }
  // A CSV field: quoted (RFC 4180) when it holds a comma, quote, CR or LF.
  void Field(std::string_view s) {
    if (s.find_first_of(",\"\r\n") == std::string_view::npos) {
      Put(s);
      return;
    }
    buf_.push_back('"');
    for (char c : s) {
      if (c == '"') buf_.push_back('"');
      buf_.push_back(c);
    }
    buf_.push_back('"');
  }
  // Shortest text that reads back as the same double ("-0" prints as "0").
  void Number(double v) {
    char tmp[32];
    if (v == 0.0) v = 0.0;
    auto r = std::to_chars(tmp, tmp + sizeof tmp, v);
    buf_.insert(buf_.end(), tmp, r.ptr);
  }
  void Integer(long long v) {
    char tmp[24];
    auto r = std::to_chars(tmp, tmp + sizeof tmp, v);
    buf_.insert(buf_.end(), tmp, r.ptr);
  }
  void EndLine() {
    buf_.push_back('\n');
    MaybeFlush();
  }
  // Writes everything buffered; false on a write error.
  bool Flush() {
    if (!buf_.empty() && file_) {
      if (std::fwrite(buf_.data(), 1, buf_.size(), file_) != buf_.size()) failed_ = true;
      buf_.clear();
    }
    return !failed_;
  }
  bool failed() const { return failed_; }

 private:
  static constexpr std::size_t kFlushAt = 1 << 20;
  void MaybeFlush() {
    if (buf_.size() >= kFlushAt) Flush();
  }
  std::FILE* file_;
  std::vector<char> buf_;
  bool failed_ = false;
};

// Shortest round-trip text of a double.
std::string FormatNumber(double v);

}  // namespace forewarden
