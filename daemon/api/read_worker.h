// The API's reader thread: filters and sorts over a read view (engine/read_view.h) run here,
// off the engine thread and off the HTTP thread, one at a time, from a bounded queue.
#pragma once

#include <condition_variable>
#include <deque>
#include <functional>
#include <mutex>
#include <thread>

namespace forewarden {

class ReadWorker {
 public:
  explicit ReadWorker(std::size_t capacity) : capacity_(capacity), thread_([this] { Run(); }) {}
  ~ReadWorker() {
    {
      std::lock_guard lock(mu_);
      stopping_ = true;
    }
    wake_.notify_all();
    thread_.join();  // queued jobs run first: each answers its request
  }
  ReadWorker(const ReadWorker&) = delete;
  ReadWorker& operator=(const ReadWorker&) = delete;

  // False when `capacity` jobs are waiting (the caller answers busy).
  bool Post(std::function<void()> job) {
    {
      std::lock_guard lock(mu_);
      if (jobs_.size() >= capacity_) return false;
      jobs_.push_back(std::move(job));
    }
    wake_.notify_one();
    return true;
  }

 private:
  void Run() {
    while (true) {
      std::function<void()> job;
      {
        std::unique_lock lock(mu_);
        wake_.wait(lock, [this] { return stopping_ || !jobs_.empty(); });
        if (jobs_.empty()) return;
        job = std::move(jobs_.front());
        jobs_.pop_front();
      }
      job();  // the caller's guard catches what it throws
    }
  }

  const std::size_t capacity_;
  std::mutex mu_;
  std::condition_variable wake_;
  std::deque<std::function<void()>> jobs_;
  bool stopping_ = false;
  std::thread thread_;  // last: starts after the members it uses
};

}  // namespace forewarden
