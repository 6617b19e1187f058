#include "daemon/common/csv.h"

#include "daemon/common/key_text.h"

#include <cstring>

namespace forewarden {

CsvReader::CsvReader(const std::string& path) : buf_(1 << 20) {
  if (path == "-") {
    file_.reset(stdin);
  } else {
    file_.reset(std::fopen(path.c_str(), "rb"));
    if (!file_) error_ = path + ": cannot open: " + std::strerror(errno);
  }
}

CsvReader::CsvReader(FromText, std::string_view text) : buf_(text.begin(), text.end()) {
  end_ = buf_.size();
  eof_ = true;
  if (buf_.empty()) buf_.resize(1);  // keeps data() valid
}

bool CsvReader::NextLine(std::string_view& out) {
  for (;;) {
    const char* start = buf_.data() + begin_;
    const void* nl = std::memchr(start, '\n', end_ - begin_);
    if (nl) {
      const char* stop = static_cast<const char*>(nl);
      out = std::string_view(start, static_cast<std::size_t>(stop - start));
      begin_ += out.size() + 1;
      ++line_;
      return true;
    }
    if (eof_) {
      if (begin_ == end_) return false;
      out = std::string_view(start, end_ - begin_);
      begin_ = end_;
      ++line_;
      return true;
    }
    // Move the partial line to the front; grow when one line fills the buffer.
    const std::size_t rest = end_ - begin_;
    std::memmove(buf_.data(), start, rest);
    begin_ = 0;
    end_ = rest;
    if (end_ == buf_.size()) buf_.resize(buf_.size() * 2);
    if (!file_) {
      eof_ = true;
      continue;
    }
    const std::size_t got = std::fread(buf_.data() + end_, 1, buf_.size() - end_, file_.get());
    if (got == 0) {
      if (std::ferror(file_.get())) {
        error_ = "read error: " + std::string(std::strerror(errno));
        return false;
      }
      eof_ = true;
    }
    end_ += got;
  }
}

bool CsvReader::Split(std::string_view line, std::vector<std::string_view>& fields) {
  fields.clear();
  // Fast path: no quotes on the line (one pass finds commas and quotes).
  {
    const char* p = line.data();
    const char* end = p + line.size();
    const char* start = p;
    bool quoted = false;
    for (; p != end; ++p) {
      if (*p == ',') {
        fields.emplace_back(start, static_cast<std::size_t>(p - start));
        start = p + 1;
      } else if (*p == '"') {
        quoted = true;
        break;
      }
    }
    if (!quoted) {
      fields.emplace_back(start, static_cast<std::size_t>(end - start));
      return true;
    }
    fields.clear();
  }
  unquoted_.clear();
  unquoted_.reserve(line.size());  // keeps the views below stable
  std::size_t i = 0;
  for (;;) {
    std::string field;
    if (i < line.size() && line[i] == '"') {
      ++i;
      for (;;) {
        if (i >= line.size()) {
          error_ = "line " + std::to_string(line_) + ": a quoted field is not closed";
          return false;
        }
        if (line[i] == '"') {
          if (i + 1 < line.size() && line[i + 1] == '"') {
            field += '"';
            i += 2;
            continue;
          }
          ++i;
          break;
        }
        field += line[i++];
      }
      if (i < line.size() && line[i] != ',') {
        error_ = "line " + std::to_string(line_) + ": text after a closing quote";
        return false;
      }
    } else {
      const std::size_t comma = line.find(',', i);
      const std::size_t stop = comma == std::string_view::npos ? line.size() : comma;
      field.assign(line.substr(i, stop - i));
      if (field.find('"') != std::string::npos) {
        error_ = "line " + std::to_string(line_) + ": a quote inside an unquoted field";
        return false;
      }
      i = stop;
    }
    unquoted_.push_back(std::move(field));
    if (i >= line.size()) break;
    ++i;  // the comma
    if (i == line.size()) {
      unquoted_.emplace_back();
      break;
    }
  }
  for (const std::string& f : unquoted_) fields.emplace_back(f);
  return true;
}

ActualsHeader ReadActualsHeader(const std::vector<std::string_view>& fields) {
  ActualsHeader h;
  h.labels.resize(fields.size());
  for (std::size_t i = 0; i < fields.size(); ++i) {
    const std::string_view f = fields[i];
    int* slot = f == "series"   ? &h.series
                : f == "period" ? &h.period
                : f == "value"  ? &h.value
                                : nullptr;
    if (slot) {
      if (*slot >= 0) h.problems.push_back("column '" + std::string(f) + "' appears twice");
      *slot = static_cast<int>(i);
    } else if (f.empty()) {
      h.problems.push_back("column " + std::to_string(i + 1) + " of the header has no name");
    } else {
      h.labels[i] = std::string(f);
    }
  }
  for (auto [col, name] :
       {std::pair{h.series, "series"}, std::pair{h.period, "period"}, std::pair{h.value, "value"}})
    if (col < 0)
      h.problems.push_back(std::string("the header has no '") + name +
                           "' column; expected series,period,value");
  return h;
}

bool CsvReader::Next(std::vector<std::string_view>& fields) {
  if (!ok()) return false;
  std::string_view line;
  while (NextLine(line)) {
    // A UTF-8 byte-order mark before the first line (spreadsheet exports) is not data.
    if (line_ == 1) line = StripByteOrderMark(line);
    if (!line.empty() && line.back() == '\r') line.remove_suffix(1);
    if (line.empty()) continue;
    return Split(line, fields);
  }
  return false;
}

}  // namespace forewarden
