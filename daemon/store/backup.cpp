#include "daemon/store/backup.h"

#include <sqlite3.h>

#include <cstdio>
#include <filesystem>

#include "daemon/store/sqlite.h"
#include "daemon/store/store.h"

namespace forewarden {

Result<BackupCopy> BackupStore(const std::string& data_dir, const std::string& to,
                               int pages_per_step) {
  BackupCopy result;
  const std::string source_path = DatabasePath(data_dir);
  std::error_code ec;
  if (!std::filesystem::exists(source_path, ec))
    return Status::NotFound(source_path + ": no store here (is --data the service's data folder?)");
  sqlite3* source = nullptr;
  if (sqlite3_open_v2(source_path.c_str(), &source, SQLITE_OPEN_READONLY, nullptr) != SQLITE_OK) {
    Status failed = Status::StoreFailed(source_path + ": " + sqlite3_errmsg(source));
    sqlite3_close(source);
    return failed;
  }
  sqlite3_busy_timeout(source, 10000);
  const std::string partial = to + ".partial";
  std::filesystem::remove(partial, ec);
  sqlite3* dest = nullptr;
  auto fail = [&](const std::string& what) {
    sqlite3_close(dest);
    sqlite3_close(source);
    std::filesystem::remove(partial, ec);
    return Status::StoreFailed(what);
  };
  if (sqlite3_open_v2(partial.c_str(), &dest, SQLITE_OPEN_READWRITE | SQLITE_OPEN_CREATE,
                      nullptr) != SQLITE_OK)
    return fail(partial + ": " + sqlite3_errmsg(dest));
  sqlite3_backup* b = sqlite3_backup_init(dest, "main", source, "main");
  if (!b) return fail(partial + ": " + sqlite3_errmsg(dest));
  int rc = SQLITE_OK;
  do {
    rc = sqlite3_backup_step(b, pages_per_step);
    if (rc == SQLITE_BUSY || rc == SQLITE_LOCKED) sqlite3_sleep(5);
  } while (rc == SQLITE_OK || rc == SQLITE_BUSY || rc == SQLITE_LOCKED);
  result.pages = sqlite3_backup_pagecount(b);
  sqlite3_backup_finish(b);
  if (rc != SQLITE_DONE) return fail("backup: " + std::string(sqlite3_errstr(rc)));
  // The copy is a standalone database (rollback journal, not WAL) that opens on its own.
  char* message = nullptr;
  if (sqlite3_exec(dest, "PRAGMA journal_mode=DELETE;", nullptr, nullptr, &message) != SQLITE_OK) {
    const std::string m = message ? message : "journal mode";
    sqlite3_free(message);
    return fail(partial + ": " + m);
  }
  sqlite3_stmt* check = nullptr;
  std::string verdict;
  if (sqlite3_prepare_v2(dest, "PRAGMA integrity_check", -1, &check, nullptr) == SQLITE_OK &&
      sqlite3_step(check) == SQLITE_ROW)
    verdict = reinterpret_cast<const char*>(sqlite3_column_text(check, 0));
  sqlite3_finalize(check);
  if (verdict != "ok") return fail(partial + ": integrity check: " + verdict);
  sqlite3_close(dest);
  dest = nullptr;
  sqlite3_close(source);
  source = nullptr;
  std::filesystem::rename(partial, to, ec);
  if (ec) {
    Status failed = Status::Io(to + ": " + ec.message());
    std::filesystem::remove(partial, ec);
    return failed;
  }
  result.bytes = static_cast<long long>(std::filesystem::file_size(to, ec));
  return result;
}

}  // namespace forewarden
