// `forewarden backup --data DIR --to FILE`: a consistent copy of the store while the service
// runs, with SQLite's online backup API (readers and the writer go on; pages that change
// during the copy are copied again). The copy is written as FILE.partial, checked with
// `PRAGMA integrity_check` and renamed to FILE only when complete. Restore: stop the service,
// replace DIR/forewarden.db with the copy (and remove DIR/forewarden.db-wal and -shm), start.
#pragma once

#include <string>

#include "daemon/common/status.h"

namespace forewarden {

struct BackupCopy {
  long long pages = 0;
  long long bytes = 0;
};

// `pages_per_step` pages are copied per step; between steps the source is free for the
// service's writer. Not found (no store in `data_dir`), store failed (SQLite refused, the copy
// failed its check) or io (the rename).
Result<BackupCopy> BackupStore(const std::string& data_dir, const std::string& to,
                               int pages_per_step = 256);

}  // namespace forewarden
