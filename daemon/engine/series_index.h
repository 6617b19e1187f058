// Open-addressing hash index from a series key to its position (linear probing, at most 70 %
// full, 8 bytes a slot: 32 bits of the key's hash and the position + 1). The keys themselves
// live with the caller, which answers KeyAt(position). Much smaller than a node-based map
// (about 12 bytes a series instead of about 56) and without an allocation per key.
// Single-threaded.
#pragma once

#include <cstdint>
#include <functional>
#include <string_view>
#include <vector>

namespace forewarden {

template <typename KeyAt>
class SeriesIndex {
 public:
  explicit SeriesIndex(KeyAt key_at) : key_at_(std::move(key_at)) {}

  void Reserve(std::size_t n) {
    std::size_t cap = 16;
    while (cap * 7 < n * 10) cap *= 2;
    if (cap > slots_.size()) Rehash(cap);
  }

  // The position of `key`, or -1.
  long Find(std::string_view key) const {
    if (slots_.empty()) return -1;
    const std::uint64_t h = Hash(key);
    const std::uint32_t tag = static_cast<std::uint32_t>(h >> 32);
    for (std::size_t i = h & mask_;; i = (i + 1) & mask_) {
      const std::uint64_t s = slots_[i];
      if (s == 0) return -1;
      if (static_cast<std::uint32_t>(s >> 32) == tag) {
        const std::size_t pos = static_cast<std::uint32_t>(s) - 1;
        if (key_at_(pos) == key) return static_cast<long>(pos);
      }
    }
  }

  // Adds a key that is not in the index yet.
  void Insert(std::string_view key, std::size_t pos) {
    if ((count_ + 1) * 10 > slots_.size() * 7) Rehash(slots_.empty() ? 16 : slots_.size() * 2);
    Place(Hash(key), pos);
    ++count_;
  }

  // Removes a key (backward-shift deletion keeps probe chains intact).
  void Erase(std::string_view key) {
    const long found = Find(key);
    if (found < 0) return;
    std::size_t i = Hash(key) & mask_;
    while (static_cast<std::uint32_t>(slots_[i]) - 1 != static_cast<std::size_t>(found))
      i = (i + 1) & mask_;
    for (std::size_t j = (i + 1) & mask_;; j = (j + 1) & mask_) {
      if (slots_[j] == 0) break;
      const std::size_t home = Hash(key_at_(static_cast<std::uint32_t>(slots_[j]) - 1)) & mask_;
      // move slot j back into the hole at i unless its home lies cyclically in (i, j]
      const bool stays = i <= j ? (home > i && home <= j) : (home > i || home <= j);
      if (!stays) {
        slots_[i] = slots_[j];
        i = j;
      }
    }
    slots_[i] = 0;
    --count_;
  }

  std::size_t size() const { return count_; }
  std::size_t bytes() const { return slots_.size() * sizeof(std::uint64_t); }

 private:
  static std::uint64_t Hash(std::string_view key) {
    std::uint64_t h = std::hash<std::string_view>{}(key);
    return h * 0x9E3779B97F4A7C15ULL;  // spread the bits the mask and the tag use
  }
  void Place(std::uint64_t h, std::size_t pos) {
    std::size_t i = h & mask_;
    while (slots_[i] != 0) i = (i + 1) & mask_;
    slots_[i] = (h >> 32 << 32) | (static_cast<std::uint64_t>(pos) + 1);
  }
  void Rehash(std::size_t cap) {
    std::vector<std::uint64_t> old = std::move(slots_);
    slots_.assign(cap, 0);
    mask_ = cap - 1;
    for (std::uint64_t s : old)
      if (s != 0) {
        const std::size_t pos = static_cast<std::uint32_t>(s) - 1;
        Place(Hash(key_at_(pos)), pos);
      }
  }

  KeyAt key_at_;
  std::vector<std::uint64_t> slots_;
  std::size_t mask_ = 0;
  std::size_t count_ = 0;
};

}  // namespace forewarden
