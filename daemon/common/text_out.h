// A buffered writer for large text outputs (replay rows, simulated feeds) with fast number
// formatting: doubles in shortest round-trip form (std::to_chars), integers, CSV fields.
// Writes to a FILE* when given one (the caller owns it), or only collects text (View/Clear).
// Single-threaded.
#pragma once

#include <charconv>
#include <cstdio>
#include <cstring>
#include <memory>
#include <string>
#include <string_view>

namespace forewarden {

class TextOut {
 public:
  explicit TextOut(std::FILE* f) : file_(f), cap_(kFlushAt + 4096), buf_(new char[cap_]) {}
  ~TextOut() { Flush(); }
  TextOut(const TextOut&) = delete;
  TextOut& operator=(const TextOut&) = delete;

  void Put(std::string_view s) {
    Reserve(s.size());
    std::memcpy(buf_.get() + size_, s.data(), s.size());
    size_ += s.size();
    MaybeFlush();
  }
  void Put(char c) {
    Reserve(1);
    buf_[size_++] = c;
  }
  // A CSV field: quoted (RFC 4180) when it holds a comma, quote, CR or LF.
  void Field(std::string_view s) {
    if (s.find_first_of(",\"\r\n") == std::string_view::npos) {
      Put(s);
      return;
    }
    Put('"');
    for (char c : s) {
      if (c == '"') Put('"');
      Put(c);
    }
    Put('"');
  }
  // A JSON string (RFC 8259): quotes, backslashes and control characters escaped; other bytes
  // (UTF-8) as they are.
  void JsonString(std::string_view s) {
    static constexpr char kHex[] = "0123456789abcdef";
    Put('"');
    for (char c : s) {
      const auto u = static_cast<unsigned char>(c);
      if (c == '"' || c == '\\') {
        Put('\\');
        Put(c);
      } else if (u < 0x20) {
        Put("\\u00");
        Put(kHex[u >> 4]);
        Put(kHex[u & 15]);
      } else {
        Put(c);
      }
    }
    Put('"');
  }
  // Shortest text that reads back as the same double ("-0" prints as "0"). Whole numbers
  // below 1e5 take a cheaper integer path with the same text: there the fixed form is never
  // longer than the scientific one, so to_chars(double) prints exactly these digits.
  void Number(double v) {
    Reserve(32);
    char* at = buf_.get() + size_;
    if (v == 0.0) v = 0.0;
    std::to_chars_result r;
    if (v > -1e5 && v < 1e5 && v == static_cast<double>(static_cast<long long>(v)))
      r = std::to_chars(at, at + 32, static_cast<long long>(v));
    else
      r = std::to_chars(at, at + 32, v);
    size_ = static_cast<std::size_t>(r.ptr - buf_.get());
  }
  // Number() for values that often repeat (a policy's smoothing constant): remembers the
  // last value's text.
  void RepeatedNumber(double v) {
    if (!(v == last_value_) || last_len_ == 0) {
      char* at = last_text_;
      last_len_ = static_cast<std::size_t>(
          std::to_chars(at, at + sizeof last_text_, v == 0.0 ? 0.0 : v).ptr - at);
      last_value_ = v;
    }
    Put(std::string_view(last_text_, last_len_));
  }
  void Integer(long long v) {
    Reserve(24);
    char* at = buf_.get() + size_;
    size_ = static_cast<std::size_t>(std::to_chars(at, at + 24, v).ptr - buf_.get());
  }
  void EndLine() {
    Put('\n');
    MaybeFlush();
  }
  // Writes everything buffered; false on a write error (now or earlier).
  bool Flush() {
    if (size_ && file_) {
      if (std::fwrite(buf_.get(), 1, size_, file_) != size_) failed_ = true;
      size_ = 0;
    }
    return !failed_;
  }
  bool failed() const { return failed_; }
  // For a TextOut without a file: the text collected so far, and forgetting it.
  std::string_view View() const { return {buf_.get(), size_}; }
  void Clear() { size_ = 0; }

 private:
  static constexpr std::size_t kFlushAt = 1 << 20;
  void Reserve(std::size_t more) {
    if (size_ + more <= cap_) return;
    std::size_t cap = cap_ * 2;
    while (cap < size_ + more) cap *= 2;
    std::unique_ptr<char[]> bigger(new char[cap]);
    std::memcpy(bigger.get(), buf_.get(), size_);
    buf_ = std::move(bigger);
    cap_ = cap;
  }
  void MaybeFlush() {
    if (file_ && size_ >= kFlushAt) Flush();
  }
  std::FILE* file_;
  std::size_t cap_;
  std::unique_ptr<char[]> buf_;
  std::size_t size_ = 0;
  bool failed_ = false;
  double last_value_ = 0.0;
  char last_text_[32];
  std::size_t last_len_ = 0;
};

// Shortest round-trip text of a double.
inline std::string FormatNumber(double v) {
  char tmp[32];
  if (v == 0.0) v = 0.0;
  auto r = std::to_chars(tmp, tmp + sizeof tmp, v);
  return std::string(tmp, r.ptr);
}

}  // namespace forewarden
