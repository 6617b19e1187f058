#include "daemon/replay.h"

#include <chrono>
#include <condition_variable>
#include <deque>
#include <mutex>
#include <thread>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <memory>
#include <sstream>
#include <unordered_map>

#include "daemon/csv.h"
#include "daemon/text_out.h"
#include "monitors/series.h"

namespace forewarden {

std::string FormatNumber(double v) {
  char tmp[32];
  if (v == 0.0) v = 0.0;
  auto r = std::to_chars(tmp, tmp + sizeof tmp, v);
  return std::string(tmp, r.ptr);
}

namespace {

struct StringHash {
  using is_transparent = void;
  std::size_t operator()(std::string_view s) const { return std::hash<std::string_view>{}(s); }
};

struct SeriesSlot {
  const config::Policy* policy;
  monitors::SeriesState state;
};

// A parsed period with its normalised text.
struct ParsedPeriod {
  monitors::PeriodParse parse;
  char text[10];
};

// Parses a period string of one kind, remembering answers (feeds repeat few periods; the
// cache stops growing at 100,000 distinct strings).
class PeriodCache {
 public:
  const ParsedPeriod& Parse(monitors::PeriodKind kind, std::string_view text) {
    auto& cache = caches_[static_cast<int>(kind)];
    auto it = cache.find(text);
    if (it != cache.end()) return it->second;
    scratch_.parse = monitors::ParsePeriod(kind, text);
    if (scratch_.parse.ok()) monitors::FormatPeriodTo(kind, scratch_.parse.ordinal, scratch_.text);
    if (scratch_.parse.ok() && cache.size() < 100000)
      return cache.emplace(std::string(text), scratch_).first->second;
    return scratch_;
  }

 private:
  std::unordered_map<std::string, ParsedPeriod, StringHash, std::equal_to<>> caches_[3];
  ParsedPeriod scratch_;
};

bool ParseValue(std::string_view text, double& out) {
  if (text.empty()) return false;
  const char* first = text.data();
  if (*first == '+') ++first;
  auto r = std::from_chars(first, text.data() + text.size(), out);
  return r.ec == std::errc() && r.ptr == text.data() + text.size();
}

std::string Where(long line, const char* field) {
  return "line " + std::to_string(line) + ", field " + field + ": ";
}

struct OutputFile {
  std::string final_path, temp_path;
  std::FILE* file = nullptr;
  bool owned = false;
  ~OutputFile() {
    if (owned && file) {
      std::fclose(file);
      std::remove(temp_path.c_str());
    }
  }
};

// One output row, computed by the engine thread and formatted by the writer thread.
struct Row {
  std::string_view key;  // points into the series map's key (stable: node-based map)
  const char* period;    // 10 chars, owned by the period cache (stable: node-based map)
  const config::Policy* policy;
  double actual;
  monitors::StepResult result;
};

// Formats and writes rows on a second thread so that number formatting and the write
// system calls overlap with parsing and the engine. Rows travel in blocks through a bounded
// queue (at most kMaxBlocks waiting), so memory stays flat whatever the input size.
class RowWriter {
 public:
  explicit RowWriter(std::FILE* file) : out_(file), thread_([this] { Work(); }) {
    current_.reserve(kBlockRows);
  }
  ~RowWriter() { Finish(); }

  Row& Next() {
    if (current_.size() == kBlockRows) Hand();
    current_.emplace_back();
    return current_.back();
  }

  // Writes everything queued; false if a write failed.
  bool Finish() {
    if (thread_.joinable()) {
      Hand();
      {
        std::lock_guard lock(mu_);
        done_ = true;
      }
      ready_.notify_all();
      thread_.join();
    }
    return out_.Flush() && !out_.failed();
  }

 private:
  static constexpr std::size_t kBlockRows = 8192, kMaxBlocks = 4;

  void Hand() {
    if (current_.empty()) return;
    std::unique_lock lock(mu_);
    room_.wait(lock, [this] { return queue_.size() < kMaxBlocks; });
    queue_.push_back(std::move(current_));
    lock.unlock();
    ready_.notify_one();
    current_ = std::vector<Row>();
    current_.reserve(kBlockRows);
  }

  void Work() {
    out_.Put(
        "series,period,actual,forecast,error,alpha,smoothed_error,mad,cusum,trigg_signal,"
        "cusum_signal,lower,upper,alerts\n");
    for (;;) {
      std::vector<Row> block;
      {
        std::unique_lock lock(mu_);
        ready_.wait(lock, [this] { return done_ || !queue_.empty(); });
        if (queue_.empty()) return;
        block = std::move(queue_.front());
        queue_.pop_front();
      }
      room_.notify_one();
      for (const Row& row : block) Format(row);
    }
  }

  void Format(const Row& row) {
    const monitors::StepResult& r = row.result;
    out_.Field(row.key);
    out_.Put(',');
    out_.Put(std::string_view(row.period, 10));
    out_.Put(',');
    out_.Number(row.actual);
    out_.Put(',');
    if (r.has_forecast) {
      out_.Number(r.forecast);
      out_.Put(',');
      out_.Number(r.error);
    } else {
      out_.Put(',');
    }
    out_.Put(',');
    out_.Number(r.alpha);
    out_.Put(',');
    out_.Number(r.stats.smoothed_error);
    out_.Put(',');
    out_.Number(r.stats.mad);
    out_.Put(',');
    out_.Number(r.stats.cusum);
    out_.Put(',');
    if (r.trigg) out_.Number(*r.trigg);
    out_.Put(',');
    if (r.cusum) out_.Number(*r.cusum);
    out_.Put(',');
    if (r.lower) out_.Number(*r.lower);
    out_.Put(',');
    if (r.upper) out_.Number(*r.upper);
    out_.Put(',');
    if (r.active) {
      bool first = true;
      const auto& rules = row.policy->spec.rules;
      for (std::size_t i = 0; i < rules.size(); ++i) {
        if (!(r.active >> i & 1)) continue;
        if (!first) out_.Put(';');
        out_.Put(rules[i].name);
        first = false;
      }
    }
    out_.EndLine();
  }

  TextOut out_;
  std::vector<Row> current_;
  std::mutex mu_;
  std::condition_variable ready_, room_;
  std::deque<std::vector<Row>> queue_;
  bool done_ = false;
  std::thread thread_;  // last: starts after the members above exist
};

}  // namespace

int RunReplay(const config::Settings& settings, const ReplayOptions& options,
              ReplaySummary& summary, std::string& error) {
  const auto t0 = std::chrono::steady_clock::now();
  CsvReader in(options.input);
  if (!in.ok()) {
    error = in.error();
    return 1;
  }
  OutputFile out_file;
  if (options.output.empty() || options.output == "-") {
    out_file.file = stdout;
  } else {
    out_file.final_path = options.output;
    out_file.temp_path = options.output + ".partial";
    out_file.file = std::fopen(out_file.temp_path.c_str(), "wb");
    if (!out_file.file) {
      error = out_file.temp_path + ": cannot create: " + std::strerror(errno);
      return 1;
    }
    out_file.owned = true;
  }

  std::vector<std::string_view> fields;
  if (!in.Next(fields)) {
    error = in.ok() ? options.input + ": empty input: expected the header series,period,value"
                    : in.error();
    return in.ok() ? 2 : 1;
  }
  int col_series = -1, col_period = -1, col_value = -1;
  for (std::size_t i = 0; i < fields.size(); ++i) {
    std::string_view f = fields[i];
    int* slot = f == "series" ? &col_series : f == "period" ? &col_period : f == "value" ? &col_value : nullptr;
    if (!slot) {
      error = "line " + std::to_string(in.line()) + ": unknown column '" + std::string(f) +
              "' in the header; expected series,period,value";
      return 2;
    }
    if (*slot >= 0) {
      error = "line " + std::to_string(in.line()) + ": column '" + std::string(f) + "' appears twice";
      return 2;
    }
    *slot = static_cast<int>(i);
  }
  for (const char* name : {"series", "period", "value"}) {
    const int col = std::strcmp(name, "series") == 0   ? col_series
                    : std::strcmp(name, "period") == 0 ? col_period
                                                       : col_value;
    if (col < 0) {
      error = "line " + std::to_string(in.line()) + ": the header has no '" + name +
              "' column; expected series,period,value";
      return 2;
    }
  }
  const std::size_t ncols = fields.size();

  RowWriter writer(out_file.file);

  std::unordered_map<std::string, SeriesSlot, StringHash, std::equal_to<>> series;
  PeriodCache periods;
  std::unordered_map<const config::Policy*, std::vector<long>> opened_counts;
  std::string problem;
  monitors::StepResult r;
  long rows = 0;

  while (in.Next(fields)) {
    const long line = in.line();
    if (fields.size() != ncols) {
      error = "line " + std::to_string(line) + ": expected " + std::to_string(ncols) +
              " fields, found " + std::to_string(fields.size());
      return 2;
    }
    const std::string_view key = fields[col_series];
    if (key.empty()) {
      error = Where(line, "series") + "the series key is empty";
      return 2;
    }
    auto it = series.find(key);
    if (it == series.end()) {
      const config::Policy* policy = config::FindPolicy(settings, key);
      if (!policy) {
        error = Where(line, "series") + "no policy matches the series '" + std::string(key) + "'";
        return 2;
      }
      it = series.emplace(std::string(key), SeriesSlot{policy, monitors::NewSeriesState(policy->spec)})
               .first;
    }
    SeriesSlot& slot = it->second;
    const config::Policy& policy = *slot.policy;
    const ParsedPeriod& parsed = periods.Parse(policy.period, fields[col_period]);
    const monitors::PeriodParse& period = parsed.parse;
    if (!period.ok()) {
      error = Where(line, "period") + period.error;
      return 2;
    }
    double value = 0.0;
    if (!ParseValue(fields[col_value], value)) {
      error = Where(line, "value") + "'" + std::string(fields[col_value]) + "' is not a number";
      return 2;
    }
    const monitors::StepStatus status =
        monitors::Step(policy.spec, slot.state, period.ordinal, value, r, &problem);
    if (status != monitors::StepStatus::kOk) {
      const char* field = status == monitors::StepStatus::kBadValue ? "value" : "period";
      if (status == monitors::StepStatus::kNotLater)
        problem = "period " + monitors::FormatPeriod(policy.period, period.ordinal) +
                  " is not after the series' last period " +
                  monitors::FormatPeriod(policy.period, slot.state.last_period) +
                  " (periods must increase within a series)";
      error = Where(line, field) + problem + " (series '" + std::string(key) + "')";
      return 2;
    }
    ++rows;
    Row& row = writer.Next();
    row.result = r;
    row.key = it->first;
    row.period = parsed.text;
    row.policy = &policy;
    row.actual = value;
    if (r.opened) {
      auto& counts = opened_counts[&policy];
      counts.resize(policy.spec.rules.size(), 0);
      for (std::size_t i = 0; i < policy.spec.rules.size(); ++i)
        if (r.opened >> i & 1) ++counts[i];
    }
  }
  if (!in.ok()) {
    error = options.input + ": " + in.error();
    return in.error().rfind("read error", 0) == 0 ? 1 : 2;
  }
  if (!writer.Finish() || std::fflush(out_file.file) != 0) {
    error = "cannot write the output: " + std::string(std::strerror(errno));
    return 1;
  }
  if (out_file.owned) {
    const int rc = std::fclose(out_file.file);
    out_file.file = nullptr;
    if (rc != 0 || std::rename(out_file.temp_path.c_str(), out_file.final_path.c_str()) != 0) {
      error = out_file.final_path + ": cannot write: " + std::strerror(errno);
      std::remove(out_file.temp_path.c_str());
      return 1;
    }
    out_file.owned = false;
  }
  summary.series = static_cast<long>(series.size());
  summary.actuals = rows;
  for (const config::Policy& p : settings.policies)
    for (const auto& rule : p.spec.rules) summary.alerts_opened[p.name + "/" + rule.name] = 0;
  for (const auto& [policy, counts] : opened_counts)
    for (std::size_t i = 0; i < counts.size(); ++i)
      summary.alerts_opened[policy->name + "/" + policy->spec.rules[i].name] += counts[i];
  summary.seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  return 0;
}

std::string FormatReplaySummary(const ReplaySummary& s) {
  std::ostringstream out;
  char rate[64];
  std::snprintf(rate, sizeof rate, "%.3f s, %.0f actuals/s", s.seconds,
                s.seconds > 0 ? static_cast<double>(s.actuals) / s.seconds : 0.0);
  out << "replay: " << s.series << " series, " << s.actuals << " actuals, " << rate << '\n';
  out << "alerts opened by rule:";
  if (s.alerts_opened.empty()) out << " (no rules)";
  out << '\n';
  for (const auto& [rule, count] : s.alerts_opened) out << "  " << rule << ": " << count << '\n';
  return out.str();
}

}  // namespace forewarden
