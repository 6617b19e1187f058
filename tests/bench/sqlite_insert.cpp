// Baseline of the ingest benchmark: insert the rows of an actuals CSV into SQLite the plainest
// fast way (WAL, synchronous FULL, one prepared INSERT into a table shaped like forewarden's
// `actuals`, one transaction per batch of N rows). Prints rows and seconds.
//   forewarden_bench_sqlite FEED.csv DB_PATH BATCH_ROWS
#include <sqlite3.h>

#include <chrono>
#include <cstdio>
#include <string>
#include <unordered_map>
#include <vector>

#include "daemon/common/csv.h"

int main(int argc, char** argv) {
  if (argc != 4) {
    std::fprintf(stderr, "usage: forewarden_bench_sqlite FEED.csv DB_PATH BATCH_ROWS\n");
    return 2;
  }
  const long batch = std::stol(argv[3]);
  forewarden::CsvReader in(argv[1]);
  std::vector<std::string_view> f;
  if (!in.Next(f)) return 1;
  struct Row {
    long series;
    std::string period;
    double value;
  };
  std::vector<Row> rows;
  std::unordered_map<std::string, long> ids;
  while (in.Next(f)) {
    auto it = ids.emplace(std::string(f[0]), static_cast<long>(ids.size())).first;
    rows.push_back({it->second, std::string(f[1]), std::stod(std::string(f[2]))});
  }
  sqlite3* db = nullptr;
  if (sqlite3_open(argv[2], &db) != SQLITE_OK) return 1;
  sqlite3_exec(
      db,
      "PRAGMA journal_mode=WAL; PRAGMA synchronous=FULL;"
      "CREATE TABLE IF NOT EXISTS actuals(series_id INTEGER NOT NULL, period TEXT NOT NULL,"
      " value REAL NOT NULL, PRIMARY KEY(series_id, period)) WITHOUT ROWID;",
      nullptr, nullptr, nullptr);
  sqlite3_stmt* insert = nullptr;
  sqlite3_prepare_v2(db, "INSERT OR REPLACE INTO actuals VALUES(?1, ?2, ?3)", -1, &insert, nullptr);
  const auto t0 = std::chrono::steady_clock::now();
  for (std::size_t i = 0; i < rows.size();) {
    sqlite3_exec(db, "BEGIN", nullptr, nullptr, nullptr);
    for (long n = 0; n < batch && i < rows.size(); ++n, ++i) {
      sqlite3_bind_int64(insert, 1, rows[i].series);
      sqlite3_bind_text(insert, 2, rows[i].period.data(), static_cast<int>(rows[i].period.size()),
                        SQLITE_STATIC);
      sqlite3_bind_double(insert, 3, rows[i].value);
      if (sqlite3_step(insert) != SQLITE_DONE) return 1;
      sqlite3_reset(insert);
    }
    if (sqlite3_exec(db, "COMMIT", nullptr, nullptr, nullptr) != SQLITE_OK) return 1;
  }
  const double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  sqlite3_finalize(insert);
  sqlite3_close(db);
  std::printf("%zu %.6f\n", rows.size(), s);
  return 0;
}
