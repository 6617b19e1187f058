// The drop folder: a nightly extract lands as a CSV file in the incoming folder and is one
// batch. Write it under a temporary name (ending in .tmp, or starting with '.') and rename it
// to NAME.csv when complete; only *.csv files are picked up, oldest name first.
//   committed -> moved to done/NAME.csv
//   bad input -> moved to rejected/NAME.csv with rejected/NAME.csv.problems (line, field, why)
//   store failing or engine busy -> left in place and tried again later
// A crash between the commit and the move leaves the file in place; processing it again is
// safe because identical actuals are "unchanged".
#pragma once

#include <atomic>
#include <condition_variable>
#include <functional>
#include <mutex>
#include <string>
#include <thread>

#include "daemon/batch/parse.h"
#include "daemon/engine/engine.h"

namespace forewarden {

struct DropFolderCounters {
  std::atomic<long> done{0};
  std::atomic<long> rejected{0};
  std::atomic<long> retried{0};
};

class DropFolder {
 public:
  using Log = std::function<void(const std::string&)>;
  DropFolder(Engine& engine, std::string incoming, IngestLimits limits,
             std::chrono::milliseconds poll, Log log);
  ~DropFolder();
  // Creates incoming/, done/ and rejected/ and starts polling.
  Status Start();
  void Stop();
  // Processes what is there now (used by Start's thread; public for tests).
  void ScanOnce();
  const DropFolderCounters& counters() const { return counters_; }

 private:
  void ProcessFile(const std::string& name);
  Engine& engine_;
  std::string incoming_, done_, rejected_;
  IngestLimits limits_;
  std::chrono::milliseconds poll_;
  Log log_;
  DropFolderCounters counters_;
  std::mutex mu_;
  std::condition_variable wake_;
  bool stop_ = false;
  std::thread thread_;
};

}  // namespace forewarden
