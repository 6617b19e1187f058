#include "daemon/cli/history.h"

#include <functional>
#include <map>
#include <unordered_map>

#include "daemon/common/csv.h"
#include "daemon/common/key_arena.h"
#include "daemon/common/key_text.h"
#include "daemon/common/parse_number.h"

namespace forewarden {

namespace {

struct StringHash {
  using is_transparent = void;
  std::size_t operator()(std::string_view s) const { return std::hash<std::string_view>{}(s); }
};

// Parses a period string of one kind, remembering answers (feeds repeat few periods; the
// cache stops growing at 100,000 distinct strings). Cached answers never move (node-based).
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
    if (!scratch_.parse.ok()) return scratch_;
    // Beyond the cache: one stable copy per period (bounded by the calendar, not the rows).
    return by_ordinal_[static_cast<int>(kind)]
        .try_emplace(scratch_.parse.ordinal, scratch_)
        .first->second;
  }

 private:
  std::unordered_map<std::string, ParsedPeriod, StringHash, std::equal_to<>> caches_[3];
  ParsedPeriod scratch_;
  std::map<monitors::PeriodOrdinal, ParsedPeriod> by_ordinal_[3];
};

std::string Where(long line, const char* field) {
  return "line " + std::to_string(line) + ", field " + field + ": ";
}

}  // namespace

struct HistoryReader::Impl {
  const config::Settings& settings;
  std::string input;
  CsvReader in;
  std::vector<std::string_view> fields;
  ActualsHeader header;
  std::size_t ncols = 0;
  // Series state lives in first-seen order; feeds usually repeat the same order every period,
  // so each series remembers which series came next and the hash lookup is skipped when that
  // guess is right (the memory walk is then sequential too).
  std::deque<HistorySeries> slots;
  KeyArena keys;
  std::unordered_map<std::string_view, HistorySeries*, StringHash, std::equal_to<>> series;
  HistorySeries* previous = nullptr;
  PeriodCache periods;
  std::string problem;

  Impl(const config::Settings& s, const std::string& path) : settings(s), input(path), in(path) {}
};

HistoryReader::HistoryReader(const config::Settings& settings, const std::string& input)
    : impl_(std::make_unique<Impl>(settings, input)) {}
HistoryReader::~HistoryReader() = default;

std::size_t HistoryReader::series_count() const {
  return impl_->slots.size();
}
const std::deque<HistorySeries>& HistoryReader::series() const {
  return impl_->slots;
}

const HistorySeries* HistoryReader::Find(std::string_view key) const {
  auto it = impl_->series.find(key);
  return it == impl_->series.end() ? nullptr : it->second;
}

Status HistoryReader::Open() {
  Impl& m = *impl_;
  if (!m.in.ok()) return Status::Io(m.in.error());
  if (!m.in.Next(m.fields)) {
    if (!m.in.ok()) return Status::Io(m.in.error());
    return Status::Invalid(m.input + ": empty input: expected the header series,period,value");
  }
  m.header = ReadActualsHeader(m.fields);
  if (!m.header.problems.empty())
    return Status::Invalid("line " + std::to_string(m.in.line()) + ": " +
                           m.header.problems.front());
  m.ncols = m.fields.size();
  return Status::Ok();
}

Result<bool> HistoryReader::Next(HistoryRow& row, monitors::StepResult& result) {
  Impl& m = *impl_;
  std::vector<std::string_view>& fields = m.fields;
  if (!m.in.Next(fields)) {
    if (m.in.ok()) return false;
    const std::string what = m.input + ": " + m.in.error();
    if (m.in.error().rfind("read error", 0) == 0) return Status::Io(what);
    return Status::Invalid(what);
  }
  const long line = m.in.line();
  if (fields.size() != m.ncols) {
    return Status::Invalid("line " + std::to_string(line) + ": expected " +
                           std::to_string(m.ncols) + " fields, found " +
                           std::to_string(fields.size()));
  }
  const std::string_view key = fields[m.header.series];
  if (key.empty()) return Status::Invalid(Where(line, "series") + "the series key is empty");
  HistorySeries* found = m.previous ? m.previous->next_seen : nullptr;
  if (!found || found->key != key) {
    auto it = m.series.find(key);
    if (it != m.series.end()) {
      found = it->second;
    } else {
      if (std::string why = KeyTextProblem(key); !why.empty())
        return Status::Invalid(Where(line, "series") + "the series key holds " + why);
      std::vector<std::pair<std::string, std::string>> labels;
      for (std::size_t i = 0; i < m.ncols; ++i)
        if (!m.header.labels[i].empty() && !fields[i].empty())
          labels.emplace_back(m.header.labels[i], std::string(fields[i]));
      const config::Policy* policy = config::FindPolicy(m.settings, key, labels);
      if (!policy) {
        return Status::Invalid(Where(line, "series") + "no policy matches the series '" +
                               std::string(key) + "'");
      }
      HistorySeries& s = m.slots.emplace_back();
      s.key = m.keys.Add(key);
      s.policy = policy;
      s.index = m.slots.size() - 1;
      s.state = monitors::NewSeriesState(policy->spec);
      found = &s;
      m.series.emplace(found->key, found);
    }
    if (m.previous) m.previous->next_seen = found;
  }
  m.previous = found;
  HistorySeries& slot = *found;
  const config::Policy& policy = *slot.policy;
  const ParsedPeriod& parsed = m.periods.Parse(policy.period, fields[m.header.period]);
  const monitors::PeriodParse& period = parsed.parse;
  if (!period.ok()) return Status::Invalid(Where(line, "period") + period.error);
  double value = 0.0;
  // Not finite (nan, inf): the step refuses it below with the same words as the service.
  if (ReadNumber(fields[m.header.value], value) == NumberText::kNotANumber) {
    return Status::Invalid(Where(line, "value") + "'" + std::string(fields[m.header.value]) +
                           "' is not a number");
  }
  const double mad_before = slot.state.stats.mad;
  const monitors::StepStatus status =
      monitors::Step(policy.spec, slot.state, period.ordinal, value, result, &m.problem);
  if (status != monitors::StepStatus::kOk) {
    const char* field = status == monitors::StepStatus::kBadValue ? "value" : "period";
    if (status == monitors::StepStatus::kNotLater)
      m.problem = "period " + monitors::FormatPeriod(policy.period, period.ordinal) +
                  " is not after the series' last period " +
                  monitors::FormatPeriod(policy.period, slot.state.last_period) +
                  " (periods must increase within a series)";
    return Status::Invalid(Where(line, field) + m.problem + " (series '" + std::string(key) + "')");
  }
  row.series = &slot;
  row.period = &parsed;
  row.value = value;
  row.line = line;
  row.mad_before = mad_before;
  return true;
}

}  // namespace forewarden
