#include "daemon/store/sqlite.h"

#include <cstdint>
#include <ctime>

namespace forewarden {

bool Stmt::Step() {
  const int rc = sqlite3_step(stmt_.get());
  if (rc == SQLITE_ROW) {
    row_ = true;
    return true;
  }
  row_ = false;
  if (rc == SQLITE_DONE) {
    Reset();
    return true;
  }
  db_->Fail("statement");
  Reset();
  return false;
}

bool Stmt::Run() {
  while (Step())
    if (!Row()) return true;
  return false;
}

void Stmt::Reset() {
  sqlite3_reset(stmt_.get());
  sqlite3_clear_bindings(stmt_.get());
  row_ = false;
}

bool Db::Open(const std::string& path) {
  sqlite3* raw = nullptr;
  const int rc =
      sqlite3_open_v2(path.c_str(), &raw,
                      SQLITE_OPEN_READWRITE | SQLITE_OPEN_CREATE | SQLITE_OPEN_NOMUTEX, nullptr);
  db_.reset(raw);
  if (rc != SQLITE_OK) return Fail("open " + path);
  sqlite3_extended_result_codes(raw, 1);
  return true;
}

void Db::WaitForLocks(int ms) {
  // The handler's context is the wait in 100-microsecond steps.
  static_assert(sizeof(void*) >= sizeof(std::intptr_t));
  sqlite3_busy_handler(
      db_.get(),
      [](void* steps, int count) -> int {
        if (count >= static_cast<int>(reinterpret_cast<std::intptr_t>(steps))) return 0;
        sqlite3_sleep(0);  // yield
        struct timespec t {
          0, 100000
        };
        nanosleep(&t, nullptr);
        return 1;
      },
      // the wait in the handler's context pointer: no allocation to outlive the connection
      // NOLINTNEXTLINE(performance-no-int-to-ptr)
      reinterpret_cast<void*>(static_cast<std::intptr_t>(ms) * 10));
}

bool Db::Exec(const std::string& sql) {
  char* message = nullptr;
  if (sqlite3_exec(db_.get(), sql.c_str(), nullptr, nullptr, &message) != SQLITE_OK) {
    error_ = std::string(message ? message : "unknown error") + " (in: " + sql.substr(0, 60) + ")";
    sqlite3_free(message);
    return false;
  }
  return true;
}

Stmt Db::Prepare(std::string_view sql) {
  sqlite3_stmt* stmt = nullptr;
  if (sqlite3_prepare_v3(db_.get(), sql.data(), static_cast<int>(sql.size()),
                         SQLITE_PREPARE_PERSISTENT, &stmt, nullptr) != SQLITE_OK) {
    Fail("prepare " + std::string(sql.substr(0, 60)));
    return Stmt();
  }
  return Stmt(this, stmt);
}

bool Db::Fail(std::string_view context) {
  error_ = std::string(context) + ": " + (db_ ? sqlite3_errmsg(db_.get()) : "out of memory");
  return false;
}

}  // namespace forewarden
