// A fixed-capacity ring of values: the look-back store of the stateful QC
// tests. Its memory is allocated once at construction and never grows, which
// is what bounds a channel's state. Not thread-safe.
#pragma once

#include <cstddef>
#include <vector>

namespace tarn::pipeline {

template <typename T>
class RingBuffer {
 public:
  // REQUIRES: capacity >= 1.
  explicit RingBuffer(std::size_t capacity = 1) : data_(capacity ? capacity : 1) {}

  std::size_t size() const { return size_; }
  std::size_t capacity() const { return data_.size(); }
  bool empty() const { return size_ == 0; }
  bool full() const { return size_ == data_.size(); }
  void clear() { head_ = size_ = 0; }

  // Appends; when full the oldest element is overwritten (callers that must
  // account for the evicted element check full() first).
  void push_back(const T& v) {
    if (full()) {
      data_[head_] = v;
      head_ = next(head_);
    } else {
      data_[index(size_)] = v;
      ++size_;
    }
  }
  // REQUIRES: !empty().
  void pop_front() {
    head_ = next(head_);
    --size_;
  }
  // REQUIRES: !empty().
  void pop_back() { --size_; }
  // i = 0 is the oldest. REQUIRES: i < size().
  const T& operator[](std::size_t i) const { return data_[index(i)]; }
  T& operator[](std::size_t i) { return data_[index(i)]; }
  const T& front() const { return data_[head_]; }
  const T& back() const { return data_[index(size_ - 1)]; }

  std::size_t heap_bytes() const { return data_.capacity() * sizeof(T); }

 private:
  std::size_t next(std::size_t i) const { return i + 1 == data_.size() ? 0 : i + 1; }
  std::size_t index(std::size_t i) const {
    std::size_t j = head_ + i;
    return j >= data_.size() ? j - data_.size() : j;
  }
  std::vector<T> data_;
  std::size_t head_ = 0;
  std::size_t size_ = 0;
};

}  // namespace tarn::pipeline
