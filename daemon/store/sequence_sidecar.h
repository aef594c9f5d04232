// Per-station packet sequence numbers that are never reused, even when the
// outbox database is deleted or moved aside.
//
// The sidecar file `<outbox db>.seq` holds the highest number reserved so far.
// Numbers are reserved in blocks ahead of use: before the first number of a new
// block is handed out, the sidecar is rewritten atomically (write a temp file,
// fsync, rename over, fsync the directory). On start the allocator continues at
// max(outbox highest, sidecar, archive's record) + 1, so numbers reserved but
// not used before a restart are skipped, never handed out twice.
//
// When the rename cannot be done because the disk is full, the sidecar is
// overwritten in place (same length, so no new blocks are needed) and fsynced.
// When even that fails (read-only file system), take() returns no_sequence and
// the caller holds its packet until a number can be reserved.
//
// File format (text, one line, fixed width 41 bytes including the newline):
//   "tarn-seq 1 <reserved_through: 20 digits> <crc32: 8 hex>\n"
// crc32 (IEEE 802.3, reflected, poly 0xEDB88320) over the first 31 bytes.
//
// Thread-safety: one thread.
#pragma once

#include <cstdint>
#include <string>

#include "daemon/store/store_status.h"

namespace tarn::store {

class SequenceSidecar {
 public:
  explicit SequenceSidecar(std::string path) : path_(std::move(path)) {}
  const std::string& path() const { return path_; }
  // 0 when there is no file; damaged when the file cannot be read as written above.
  Result<std::uint64_t> read() const;
  Status write(std::uint64_t reserved_through) const;

 private:
  std::string path_;
};

class SequenceAllocator {
 public:
  // REQUIRES: block >= 1.
  SequenceAllocator(SequenceSidecar sidecar, std::uint64_t block)
      : sidecar_(std::move(sidecar)), block_(block) {}

  // Continues after `highest_elsewhere` (outbox and archive records) or the
  // sidecar, whichever is higher, and reserves the first block. A damaged
  // sidecar is logged and ignored (the other records still hold).
  Status start(std::uint64_t highest_elsewhere);
  // The next number, reserving a new block first when needed.
  Result<std::uint64_t> take();
  // The number take() would return next.
  std::uint64_t next() const { return next_; }
  std::uint64_t reserved_through() const { return reserved_; }
  // First and last number skipped at start (reserved before, never used); first > last: none.
  std::uint64_t skipped_first() const { return skipped_first_; }
  std::uint64_t skipped_last() const { return skipped_last_; }

 private:
  SequenceSidecar sidecar_;
  std::uint64_t block_;
  std::uint64_t next_ = 1;
  std::uint64_t reserved_ = 0;
  std::uint64_t skipped_first_ = 1, skipped_last_ = 0;
};

// CRC-32 (IEEE), as used by zlib and PNG. Check value of "123456789": 0xCBF43926.
std::uint32_t crc32_ieee(const void* data, std::size_t n);

}  // namespace tarn::store
