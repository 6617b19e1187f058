// libFuzzer target: batch parsing (CSV and NDJSON) and period parsing never crash, and every
// row they accept has a non-empty key and a finite value; problems always name a line >= 1.
//   cmake -S . -B build/fuzz -G Ninja -DCMAKE_CXX_COMPILER=clang++ -DFOREWARDEN_FUZZ=ON
//   build/fuzz/tests/fuzz/forewarden_fuzz_ingest -max_total_time=60
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <string_view>

#include "daemon/batch/parse.h"
#include "monitors/period.h"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string_view text(reinterpret_cast<const char*>(data), size);
  for (const forewarden::ParsedBatch& b :
       {forewarden::ParseCsvBatch(text, forewarden::IngestLimits{1000, 64, 4, 64}),
        forewarden::ParseNdjsonBatch(text, forewarden::IngestLimits{1000, 64, 4, 64})}) {
    for (const auto& row : b.rows)
      if (row.series.empty() || !std::isfinite(row.value) || row.line < 1) std::abort();
    for (const auto& p : b.problems)
      if (p.line < 1 || p.field.empty() || p.message.empty()) std::abort();
    if (b.problem_count < static_cast<long>(b.problems.size())) std::abort();
  }
  for (auto kind :
       {monitors::PeriodKind::kDay, monitors::PeriodKind::kWeek, monitors::PeriodKind::kMonth}) {
    const monitors::PeriodParse p = monitors::ParsePeriod(kind, text.substr(0, 16));
    if (p.ok()) {
      // a parsed period prints as a date that parses back to the same period
      const monitors::PeriodParse again =
          monitors::ParsePeriod(kind, monitors::FormatPeriod(kind, p.ordinal));
      if (!again.ok() || again.ordinal != p.ordinal) std::abort();
    }
  }
  return 0;
}
