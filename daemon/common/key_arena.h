// Series keys stored back to back in large blocks: no allocation per key and stable addresses
// (string_views into the arena stay valid for its lifetime). Keys are never freed one by one.
// Single-threaded.
#pragma once

#include <algorithm>
#include <cstring>
#include <memory>
#include <string_view>
#include <vector>

namespace forewarden {

class KeyArena {
 public:
  std::string_view Add(std::string_view key) {
    if (blocks_.empty() || used_ + key.size() > block_size_) {
      block_size_ = std::max(kBlock, key.size());
      blocks_.push_back(std::make_unique<char[]>(block_size_));
      used_ = 0;
    }
    char* at = blocks_.back().get() + used_;
    std::memcpy(at, key.data(), key.size());
    used_ += key.size();
    return {at, key.size()};
  }

 private:
  static constexpr std::size_t kBlock = 1 << 20;
  std::vector<std::unique_ptr<char[]>> blocks_;
  std::size_t used_ = 0;
  std::size_t block_size_ = kBlock;
};

}  // namespace forewarden
