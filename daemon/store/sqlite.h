// A thin RAII layer over SQLite: a connection and prepared statements, owned by one thread.
// Errors are values: every call that can fail returns false and leaves the message in
// Db::error(). No exceptions.
#pragma once

#include <sqlite3.h>

#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <string_view>

namespace forewarden {

class Db;

class Stmt {
 public:
  Stmt() = default;
  Stmt(Db* db, sqlite3_stmt* stmt) : db_(db), stmt_(stmt) {}
  bool valid() const { return stmt_ != nullptr; }

  Stmt& Bind(int i, std::int64_t v) {
    sqlite3_bind_int64(stmt_.get(), i, v);
    return *this;
  }
  Stmt& Bind(int i, double v) {
    sqlite3_bind_double(stmt_.get(), i, v);
    return *this;
  }
  Stmt& Bind(int i, std::string_view v) {
    sqlite3_bind_text(stmt_.get(), i, v.data(), static_cast<int>(v.size()), SQLITE_TRANSIENT);
    return *this;
  }
  Stmt& BindBlob(int i, std::string_view v) {
    sqlite3_bind_blob(stmt_.get(), i, v.data(), static_cast<int>(v.size()), SQLITE_TRANSIENT);
    return *this;
  }
  Stmt& BindNull(int i) {
    sqlite3_bind_null(stmt_.get(), i);
    return *this;
  }

  // Steps once: true with a row available (Row() is then true), true at the end (Row() false),
  // false on an error (message in the Db). Resets itself at the end or on error.
  bool Step();
  bool Row() const { return row_; }
  // Runs to completion (statements that return no rows).
  bool Run();

  std::int64_t Int(int col) const { return sqlite3_column_int64(stmt_.get(), col); }
  double Double(int col) const { return sqlite3_column_double(stmt_.get(), col); }
  bool IsNull(int col) const { return sqlite3_column_type(stmt_.get(), col) == SQLITE_NULL; }
  int Columns() const { return sqlite3_column_count(stmt_.get()); }
  const char* Name(int col) const { return sqlite3_column_name(stmt_.get(), col); }
  int Type(int col) const { return sqlite3_column_type(stmt_.get(), col); }
  std::string_view Text(int col) const {
    const auto* p = reinterpret_cast<const char*>(sqlite3_column_text(stmt_.get(), col));
    return p ? std::string_view(p, static_cast<std::size_t>(sqlite3_column_bytes(stmt_.get(), col)))
             : std::string_view();
  }
  std::string_view Blob(int col) const {
    const auto* p = static_cast<const char*>(sqlite3_column_blob(stmt_.get(), col));
    return p ? std::string_view(p, static_cast<std::size_t>(sqlite3_column_bytes(stmt_.get(), col)))
             : std::string_view();
  }
  void Reset();

 private:
  struct Finalizer {
    void operator()(sqlite3_stmt* s) const { sqlite3_finalize(s); }
  };
  Db* db_ = nullptr;
  std::unique_ptr<sqlite3_stmt, Finalizer> stmt_;
  bool row_ = false;
};

class Db {
 public:
  // Opens (creating if needed) the database file.
  bool Open(const std::string& path);
  // Waits up to `ms` for a lock another connection holds, retrying every 100 microseconds
  // (SQLite's own busy timeout sleeps in steps of up to 100 ms, far longer than the short
  // transactions of the delivery worker).
  void WaitForLocks(int ms);
  // Runs one or more statements without results.
  bool Exec(const std::string& sql);
  // Prepares a statement; an invalid Stmt on error.
  Stmt Prepare(std::string_view sql);
  std::int64_t LastInsertId() const { return sqlite3_last_insert_rowid(db_.get()); }
  int Changes() const { return sqlite3_changes(db_.get()); }

  const std::string& error() const { return error_; }
  // Records the connection's current error with some context; returns false.
  bool Fail(std::string_view context);
  sqlite3* raw() { return db_.get(); }

 private:
  struct Closer {
    void operator()(sqlite3* d) const { sqlite3_close_v2(d); }
  };
  std::unique_ptr<sqlite3, Closer> db_;
  std::string error_;
};

}  // namespace forewarden
