#include "daemon/cli/replay.h"

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <cstdio>
#include <cstring>
#include <deque>
#include <memory>
#include <mutex>
#include <sstream>
#include <thread>
#include <unordered_map>

#include "daemon/cli/history.h"
#include "daemon/common/text_out.h"
#include "monitors/ahead.h"
#include "monitors/diagnosis.h"
#include "monitors/series.h"

namespace forewarden {

namespace {

// One alert episode for the --alerts file.
struct EpisodeRow {
  std::string_view key;
  const config::Policy* policy;
  std::size_t rule;
  monitors::Severity severity;
  std::string opened, escalated, resolved;
  monitors::PeriodOrdinal opened_at = 0;
  // Made when it opens and again with each of the next monitors::kDiagnosisPeriods periods,
  // so that a one-off can be told from a step; it stays as it is after that.
  monitors::Diagnosis diagnosis;
  std::string began;  // the period the diagnosis says the change began
};

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
  std::string_view key;  // points into the KeyArena
  const char* period;    // 10 chars, owned by the history reader (stable)
  const config::Policy* policy;
  double actual;
  monitors::StepResult result;
  std::vector<double> ahead;  // --horizon: forecasts for the next periods (empty: none yet)
};

// Formats rows on two threads and writes them in order, so that number formatting (the
// largest cost: ~45 ns per shortest round-trip double here) and the write system calls
// overlap with parsing and the engine. Block i goes to formatter i % 2; a formatter writes
// its text when its block's turn comes. Each formatter holds at most kMaxBlocks waiting
// blocks, so memory stays flat whatever the input size.
class RowWriter {
 public:
  RowWriter(std::FILE* file, int horizon) : file_(file), horizon_(horizon) {
    current_.reserve(kBlockRows);
    std::string header =
        "series,period,actual,forecast,error,alpha,smoothed_error,mad,cusum,trigg_signal,"
        "cusum_signal,lower,upper,alerts";
    for (int h = 1; h <= horizon; ++h) header += ",ahead_" + std::to_string(h);
    header += '\n';
    if (std::fwrite(header.data(), 1, header.size(), file_) != header.size()) failed_ = true;
    for (auto& f : formatters_) f.thread = std::thread([this, &f] { Work(f); });
  }
  ~RowWriter() { Finish(); }

  Row& Next() {
    if (current_.size() == kBlockRows) Hand();
    current_.emplace_back();
    return current_.back();
  }
  // Forgets the row Next() returned last.
  void DropLast() { current_.pop_back(); }

  // Stops without formatting or writing what is still queued (the input was bad: the
  // output is thrown away).
  void Abandon() {
    abandoned_ = true;
    {
      std::lock_guard lock(turn_mu_);  // wakes a formatter waiting for its turn
    }
    turn_cv_.notify_all();
    current_.clear();
    Finish();
  }

  // Writes everything handed over; false if a write failed.
  bool Finish() {
    if (finished_) return !failed_;
    finished_ = true;
    Hand();
    for (auto& f : formatters_) {
      {
        std::lock_guard lock(f.mu);
        f.done = true;
      }
      f.ready.notify_all();
    }
    for (auto& f : formatters_) f.thread.join();
    return !failed_;
  }

 private:
  static constexpr std::size_t kBlockRows = 8192, kMaxBlocks = 3, kFormatters = 2;

  struct Block {
    long seq = 0;
    std::vector<Row> rows;
  };
  struct Formatter {
    std::mutex mu;
    std::condition_variable ready, room;
    std::deque<Block> queue;
    bool done = false;
    std::thread thread;
  };

  void Hand() {
    if (current_.empty()) return;
    Formatter& f = formatters_[static_cast<std::size_t>(handed_ % kFormatters)];
    {
      std::unique_lock lock(f.mu);
      f.room.wait(lock, [&] { return f.queue.size() < kMaxBlocks; });
      f.queue.push_back(Block{handed_++, std::move(current_)});
    }
    f.ready.notify_one();
    current_ = std::vector<Row>();
    current_.reserve(kBlockRows);
  }

  void Work(Formatter& f) {
    TextOut text(nullptr);
    for (;;) {
      Block block;
      {
        std::unique_lock lock(f.mu);
        f.ready.wait(lock, [&] { return f.done || !f.queue.empty(); });
        if (f.queue.empty()) return;
        block = std::move(f.queue.front());
        f.queue.pop_front();
      }
      f.room.notify_one();
      if (abandoned_) continue;
      for (const Row& row : block.rows) Format(text, row, horizon_);
      std::unique_lock lock(turn_mu_);
      turn_cv_.wait(lock, [&] { return turn_ == block.seq || abandoned_; });
      const std::string_view bytes = text.View();
      if (!failed_ && !abandoned_ &&
          std::fwrite(bytes.data(), 1, bytes.size(), file_) != bytes.size())
        failed_ = true;
      text.Clear();
      ++turn_;
      lock.unlock();
      turn_cv_.notify_all();
    }
  }

  static void Format(TextOut& out, const Row& row, int horizon) {
    const monitors::StepResult& r = row.result;
    out.Field(row.key);
    out.Put(',');
    out.Put(std::string_view(row.period, 10));
    out.Put(',');
    out.Number(row.actual);
    out.Put(',');
    if (r.has_forecast) {
      out.Number(r.forecast);
      out.Put(',');
      out.Number(r.error);
    } else {
      out.Put(',');
    }
    out.Put(',');
    out.RepeatedNumber(r.alpha);
    out.Put(',');
    out.Number(r.stats.smoothed_error);
    out.Put(',');
    out.Number(r.stats.mad);
    out.Put(',');
    out.Number(r.stats.cusum);
    out.Put(',');
    if (r.trigg) out.Number(*r.trigg);
    out.Put(',');
    if (r.cusum) out.Number(*r.cusum);
    out.Put(',');
    if (r.lower) out.Number(*r.lower);
    out.Put(',');
    if (r.upper) out.Number(*r.upper);
    out.Put(',');
    if (r.active) {
      bool first = true;
      const auto& rules = row.policy->spec.rules;
      for (std::size_t i = 0; i < rules.size(); ++i) {
        if (!(r.active >> i & 1)) continue;
        if (!first) out.Put(';');
        out.Put(rules[i].name);
        first = false;
      }
    }
    for (int h = 0; h < horizon; ++h) {
      out.Put(',');
      if (static_cast<std::size_t>(h) < row.ahead.size()) out.Number(row.ahead[h]);
    }
    out.Put('\n');
  }

  std::FILE* file_;
  const int horizon_;
  std::vector<Row> current_;
  long handed_ = 0;
  bool finished_ = false;
  std::atomic<bool> abandoned_{false};
  std::mutex turn_mu_;
  std::condition_variable turn_cv_;
  long turn_ = 0;        // sequence number of the next block to write (guarded by turn_mu_)
  bool failed_ = false;  // guarded by turn_mu_ while formatters run
  Formatter formatters_[kFormatters];
};

// The --alerts file: one row per episode in the order they opened (written under a temporary
// name and renamed into place).
bool WriteEpisodes(const std::string& path, const std::vector<EpisodeRow>& episodes,
                   std::string& error) {
  const std::string temp = path + ".partial";
  std::FILE* f = std::fopen(temp.c_str(), "wb");
  if (!f) {
    error = temp + ": cannot create: " + std::strerror(errno);
    return false;
  }
  TextOut out(f);
  out.Put(
      "series,policy,rule,severity,opened,escalated,resolved,change_began,kind,level,"
      "level_lower,level_upper,action\n");
  for (const EpisodeRow& e : episodes) {
    out.Field(e.key);
    out.Put(',');
    out.Field(e.policy->name);
    out.Put(',');
    out.Field(e.policy->spec.rules[e.rule].name);
    out.Put(',');
    out.Put(monitors::SeverityName(e.severity));
    for (const std::string* t : {&e.opened, &e.escalated, &e.resolved}) {
      out.Put(',');
      out.Put(*t);
    }
    out.Put(',');
    if (e.diagnosis.ok) {
      const monitors::Diagnosis& d = e.diagnosis;
      out.Put(e.began);
      out.Put(',');
      out.Put(monitors::ChangeKindName(d.kind));
      for (double v : {d.level, d.lower, d.upper}) {
        out.Put(',');
        out.Number(v);
      }
      out.Put(',');
      out.Field(d.advice);
    } else {
      out.Put(",,,,,");
    }
    out.Put('\n');
  }
  const bool ok = out.Flush() && std::fclose(f) == 0;
  if (!ok || std::rename(temp.c_str(), path.c_str()) != 0) {
    error = path + ": cannot write: " + std::strerror(errno);
    std::remove(temp.c_str());
    return false;
  }
  return true;
}

}  // namespace

Result<ReplaySummary> RunReplay(const config::Settings& settings, const ReplayOptions& options) {
  ReplaySummary summary;
  std::string error;
  const auto t0 = std::chrono::steady_clock::now();
  OutputFile out_file;
  if (options.output.empty() || options.output == "-") {
    out_file.file = stdout;
  } else {
    out_file.final_path = options.output;
    out_file.temp_path = options.output + ".partial";
    out_file.file = std::fopen(out_file.temp_path.c_str(), "wb");
    if (!out_file.file) {
      return Status::Io(out_file.temp_path + ": cannot create: " + std::strerror(errno));
    }
    out_file.owned = true;
  }

  HistoryReader reader(settings, options.input);
  if (Status opened = reader.Open(); !opened) return opened;

  // Declared after the reader whose keys and periods queued rows point into, so that it is
  // destroyed (and its threads joined) first.
  const bool want_episodes = !options.alerts.empty();
  std::vector<EpisodeRow> episodes;
  // With --alerts: per series (by first-seen index), its open episodes as (rule, episode row).
  std::vector<std::vector<std::pair<std::size_t, std::size_t>>> open_episodes;
  // With --alerts: per series, its newest periods for the episodes' diagnosis.
  std::vector<monitors::RecentPeriods> recent;  // each of monitors::kDiagnosisWindow periods
  std::vector<std::size_t> touched;             // episode rows changed by this step
  std::vector<monitors::PeriodOrdinal> d_period;
  std::vector<double> d_actual, d_forecast, d_mad;
  RowWriter writer(out_file.file, options.horizon);
  struct AbandonOnError {
    RowWriter& writer;
    bool done = false;
    ~AbandonOnError() {
      if (!done) writer.Abandon();
    }
  } abandon_on_error{writer};
  std::unordered_map<const config::Policy*, std::vector<long>> opened_counts;
  long rows = 0;

  for (;;) {
    Row& row = writer.Next();
    HistoryRow read;
    const Result<bool> more = reader.Next(read, row.result);
    if (!more || !*more) {
      writer.DropLast();
      if (!more) return more.status();
      break;
    }
    HistorySeries& slot = *read.series;
    const config::Policy& policy = *slot.policy;
    const ParsedPeriod& parsed = *read.period;
    const monitors::StepResult& r = row.result;
    ++rows;
    if (options.horizon > 0 && slot.state.started)
      row.ahead = monitors::ForecastAhead(policy.spec.method,
                                          monitors::EffectiveConstants(policy.spec, slot.state),
                                          slot.state.model, slot.state.next_index, options.horizon);
    row.key = slot.key;
    row.period = parsed.text;
    row.policy = &policy;
    row.actual = read.value;
    if (r.episodes_opened) {
      auto& counts = opened_counts[&policy];
      counts.resize(policy.spec.rules.size(), 0);
      for (std::size_t i = 0; i < policy.spec.rules.size(); ++i)
        if (r.episodes_opened >> i & 1) ++counts[i];
    }
    if (want_episodes) {
      if (open_episodes.size() <= slot.index) {
        open_episodes.resize(slot.index + 1);
        recent.resize(slot.index + 1, monitors::RecentPeriods(monitors::kDiagnosisWindow));
      }
      recent[slot.index].Push(parsed.parse.ordinal, read.value,
                              r.has_forecast ? r.forecast : std::nan(""), read.mad_before);
      auto& open = open_episodes[slot.index];
      touched.clear();
      const auto& rules = policy.spec.rules;
      monitors::ForEachEpisodeStep(r, rules.size(), [&](const monitors::EpisodeStep& e) {
        const std::size_t i = e.rule;
        auto it =
            std::find_if(open.begin(), open.end(), [i](const auto& o) { return o.first == i; });
        if (e.resolved && it != open.end()) {
          touched.push_back(it->second);
          episodes[it->second].resolved.assign(parsed.text, sizeof parsed.text);
          open.erase(it);
          it = open.end();
        }
        if (e.opened) {
          open.push_back({i, episodes.size()});
          touched.push_back(episodes.size());
          episodes.push_back({slot.key,
                              &policy,
                              i,
                              rules[i].severity,
                              std::string(parsed.text, sizeof parsed.text),
                              "",
                              "",
                              parsed.parse.ordinal,
                              {},
                              ""});
          it = open.end() - 1;
          if (slot.state.rules[i].escalated && slot.state.rules[i].open) {
            episodes.back().severity = rules[i].escalate_severity;
            episodes.back().escalated.assign(parsed.text, sizeof parsed.text);
          }
          if (e.resolved) {  // began and ended inside the step
            episodes.back().resolved.assign(parsed.text, sizeof parsed.text);
            open.pop_back();
            it = open.end();
          }
        }
        if (e.escalated && it != open.end()) {
          episodes[it->second].severity = rules[i].escalate_severity;
          episodes[it->second].escalated.assign(parsed.text, sizeof parsed.text);
        }
      });
      // The diagnosis of every episode open after this step or changed by it, while it is at
      // most kDiagnosisPeriods old, from the series' newest periods (monitors/diagnosis.h).
      for (const auto& o : open) touched.push_back(o.second);
      if (!touched.empty()) recent[slot.index].Copy(d_period, d_actual, d_forecast, d_mad);
      for (std::size_t e : touched) {
        EpisodeRow& ep = episodes[e];
        if (parsed.parse.ordinal - ep.opened_at > monitors::kDiagnosisPeriods) continue;
        const monitors::AlertDiagnosis d = monitors::DiagnoseAlert(
            d_period, d_actual, d_forecast, d_mad, ep.opened_at,
            monitors::IsIntermittent(policy.spec.method), policy.spec.coverage);
        ep.diagnosis = d.diagnosis;
        if (d.diagnosis.ok) ep.began = monitors::FormatPeriod(policy.period, d.began);
      }
    }
  }
  abandon_on_error.done = true;
  if (!writer.Finish() || std::fflush(out_file.file) != 0) {
    return Status::Io("cannot write the output: " + std::string(std::strerror(errno)));
  }
  if (out_file.owned) {
    const int rc = std::fclose(out_file.file);
    out_file.file = nullptr;
    if (rc != 0 || std::rename(out_file.temp_path.c_str(), out_file.final_path.c_str()) != 0) {
      Status failed = Status::Io(out_file.final_path + ": cannot write: " + std::strerror(errno));
      std::remove(out_file.temp_path.c_str());
      return failed;
    }
    out_file.owned = false;
  }
  if (want_episodes && !WriteEpisodes(options.alerts, episodes, error)) return Status::Io(error);
  summary.series = static_cast<long>(reader.series_count());
  summary.actuals = rows;
  for (const config::Policy& p : settings.policies)
    for (const auto& rule : p.spec.rules) summary.alerts_opened[p.name + "/" + rule.name] = 0;
  for (const auto& [policy, counts] : opened_counts)
    for (std::size_t i = 0; i < counts.size(); ++i)
      summary.alerts_opened[policy->name + "/" + policy->spec.rules[i].name] += counts[i];
  summary.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  return summary;
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
