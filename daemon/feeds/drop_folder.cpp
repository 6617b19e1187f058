#include "daemon/feeds/drop_folder.h"

#include <algorithm>
#include <filesystem>
#include <fstream>
#include <future>
#include <sstream>

#include "daemon/batch/parse.h"

namespace forewarden {

namespace fs = std::filesystem;

DropFolder::DropFolder(Engine& engine, std::string incoming, IngestLimits limits,
                       std::chrono::milliseconds poll, Log log)
    : engine_(engine),
      incoming_(std::move(incoming)),
      done_((fs::path(incoming_) / "done").string()),
      rejected_((fs::path(incoming_) / "rejected").string()),
      limits_(limits),
      poll_(poll),
      log_(std::move(log)) {}

DropFolder::~DropFolder() {
  Stop();
}

Status DropFolder::Start() {
  std::error_code ec;
  for (const std::string& dir : {incoming_, done_, rejected_}) {
    fs::create_directories(dir, ec);
    if (ec) return Status::Io("drop folder " + dir + ": " + ec.message());
  }
  thread_ = std::thread([this] {
    std::unique_lock lock(mu_);
    while (!stop_) {
      lock.unlock();
      ScanOnce();
      lock.lock();
      wake_.wait_for(lock, poll_, [this] { return stop_; });
    }
  });
  return Status::Ok();
}

void DropFolder::Stop() {
  {
    std::lock_guard lock(mu_);
    stop_ = true;
  }
  wake_.notify_all();
  if (thread_.joinable()) thread_.join();
}

void DropFolder::ScanOnce() {
  std::vector<std::string> names;
  std::error_code ec;
  for (const auto& entry : fs::directory_iterator(incoming_, ec)) {
    if (!entry.is_regular_file()) continue;
    const std::string name = entry.path().filename().string();
    if (name.empty() || name[0] == '.' || name.size() < 5 || name.substr(name.size() - 4) != ".csv")
      continue;
    names.push_back(name);
  }
  std::sort(names.begin(), names.end());
  for (const std::string& name : names) {
    {
      std::lock_guard lock(mu_);
      if (stop_) return;
    }
    ProcessFile(name);
  }
}

void DropFolder::ProcessFile(const std::string& name) {
  const fs::path path = fs::path(incoming_) / name;
  std::ifstream in(path, std::ios::binary);
  if (!in) return;  // vanished or unreadable: try again on the next scan
  std::ostringstream text;
  text << in.rdbuf();
  ParsedBatch batch = ParseCsvBatch(text.str(), limits_);
  auto reject = [&](const std::vector<RowProblem>& problems, long count,
                    const std::string& headline) {
    std::ofstream report(fs::path(rejected_) / (name + ".problems"), std::ios::trunc);
    report << name << ": " << headline << "; nothing was applied\n";
    for (const RowProblem& p : problems)
      report << "line " << p.line << ", field " << p.field << ": " << p.message << "\n";
    if (count > static_cast<long>(problems.size()))
      report << "... and " << (count - static_cast<long>(problems.size())) << " more problems\n";
    report.close();
    std::error_code ec;
    fs::rename(path, fs::path(rejected_) / name, ec);
    counters_.rejected.fetch_add(1);
    log_("drop folder: rejected " + name + ": " + headline);
  };
  if (batch.too_many_rows) {
    reject({}, 0, "more than max_rows_per_batch (" + std::to_string(limits_.max_rows) + ") rows");
    return;
  }
  if (batch.problem_count) {
    reject(batch.problems, batch.problem_count, std::to_string(batch.problem_count) + " problems");
    return;
  }
  const long rows = static_cast<long>(batch.rows.size());
  std::promise<IngestReply> promise;
  auto future = promise.get_future();
  if (!engine_.Submit(std::move(batch.rows),
                      [&promise](IngestReply r) { promise.set_value(std::move(r)); })) {
    counters_.retried.fetch_add(1);
    return;  // queue full or stopping: next scan
  }
  IngestReply reply = future.get();
  switch (reply.status) {
    case IngestReply::Status::kOk: {
      std::error_code ec;
      fs::rename(path, fs::path(done_) / name, ec);
      counters_.done.fetch_add(1);
      log_("drop folder: " + name + ": " + std::to_string(rows) + " rows, " +
           std::to_string(reply.counts.applied) + " applied, " +
           std::to_string(reply.counts.unchanged) + " unchanged, " +
           std::to_string(reply.counts.restated) + " restated");
      return;
    }
    case IngestReply::Status::kRejected:
      reject(reply.problems, reply.problem_count,
             std::to_string(reply.problem_count) + " problems");
      return;
    case IngestReply::Status::kUnavailable:
      counters_.retried.fetch_add(1);
      log_("drop folder: " + name + " left in place: " + reply.error);
      return;
  }
}

}  // namespace forewarden
