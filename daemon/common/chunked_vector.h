// A vector whose elements never move: fixed-size chunks of 4,096 elements. Unlike std::deque
// (512-byte blocks, i.e. two large elements a block plus a heap header each), the overhead per
// element is negligible. Elements are default-constructed a chunk at a time. Single-threaded.
#pragma once

#include <cstddef>
#include <memory>
#include <vector>

namespace forewarden {

template <typename T>
class ChunkedVector {
 public:
  std::size_t size() const { return size_; }
  bool empty() const { return size_ == 0; }
  T& operator[](std::size_t i) { return chunks_[i / kChunk][i % kChunk]; }
  const T& operator[](std::size_t i) const { return chunks_[i / kChunk][i % kChunk]; }
  T& back() { return (*this)[size_ - 1]; }

  void push_back(T value) {
    if (size_ == chunks_.size() * kChunk) chunks_.push_back(std::make_unique<T[]>(kChunk));
    (*this)[size_++] = std::move(value);
  }
  // Resets the last element to a default one and forgets it.
  void pop_back() {
    (*this)[size_ - 1] = T{};
    --size_;
  }

 private:
  static constexpr std::size_t kChunk = 4096;
  std::vector<std::unique_ptr<T[]>> chunks_;
  std::size_t size_ = 0;
};

}  // namespace forewarden
