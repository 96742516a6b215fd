#include "vector_memory.hpp"

#include <malloc.h>

namespace residue {

namespace {

std::size_t size_of(const std::string& key, const Remembered& r) {
  return key.size() + r.features.size() + r.model.size() + r.band.size() + sizeof(Remembered);
}

}  // namespace

void VectorMemory::put(const std::string& sha256, Remembered entry) {
  if (capacity_ == 0) return;
  std::lock_guard lock(mutex_);
  if (auto it = index_.find(sha256); it != index_.end()) {
    bytes_ -= size_of(sha256, it->second->second);
    order_.erase(it->second);
    index_.erase(it);
  }
  bytes_ += size_of(sha256, entry);
  order_.emplace_front(sha256, std::move(entry));
  index_[sha256] = order_.begin();
  while (order_.size() > capacity_) {
    const auto& last = order_.back();
    bytes_ -= size_of(last.first, last.second);
    index_.erase(last.first);
    order_.pop_back();
  }
  // Long-lived entries among each request's short-lived buffers keep glibc's arenas from giving
  // freed pages back; returning them now and then keeps resident memory near the entries' own size.
  if (++puts_ % 256 == 0) malloc_trim(0);
}

std::optional<Remembered> VectorMemory::find(const std::string& sha256) {
  std::lock_guard lock(mutex_);
  const auto it = index_.find(sha256);
  if (it == index_.end()) return std::nullopt;
  return it->second->second;
}

std::size_t VectorMemory::size() {
  std::lock_guard lock(mutex_);
  return order_.size();
}

std::size_t VectorMemory::bytes() {
  std::lock_guard lock(mutex_);
  return bytes_;
}

}  // namespace residue
