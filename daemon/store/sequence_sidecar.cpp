#include "daemon/store/sequence_sidecar.h"

#include <fcntl.h>
#include <spdlog/spdlog.h>
#include <unistd.h>

#include <algorithm>
#include <array>
#include <cerrno>
#include <cstdio>
#include <cstring>
#include <filesystem>

#include "daemon/store/store_file.h"
#include "daemon/store/store_log.h"

namespace tarn::store {
namespace {

constexpr std::size_t record_size = 41;
constexpr std::size_t crc_span = 31;  // "tarn-seq 1 " + 20 digits

std::string make_record(std::uint64_t v) {
  char head[40];
  std::snprintf(head, sizeof head, "tarn-seq 1 %020llu", static_cast<unsigned long long>(v));
  char full[64];
  std::snprintf(full, sizeof full, "%s %08x\n", head, unsigned(crc32_ieee(head, crc_span)));
  return std::string(full);
}

StoreErrc errno_code(int e) {
  if (e == ENOSPC || e == EDQUOT) return StoreErrc::disk_full;
  if (e == EROFS || e == EACCES || e == EPERM) return StoreErrc::read_only;
  return StoreErrc::io;
}

Status os_error(const std::string& what, int e) {
  return {errno_code(e), what + ": " + std::strerror(e)};
}

// Writes all of `data` at offset 0 and fsyncs.
Status write_and_sync(int fd, const std::string& data, const std::string& path) {
  std::size_t done = 0;
  while (done < data.size()) {
    ssize_t n = ::pwrite(fd, data.data() + done, data.size() - done, off_t(done));
    if (n < 0) {
      if (errno == EINTR) continue;
      return os_error("write " + path, errno);
    }
    done += std::size_t(n);
  }
  if (::fsync(fd) != 0) return os_error("fsync " + path, errno);
  return {};
}

}  // namespace

std::uint32_t crc32_ieee(const void* data, std::size_t n) {
  static const auto table = [] {
    std::array<std::uint32_t, 256> t{};
    for (std::uint32_t i = 0; i < 256; ++i) {
      std::uint32_t c = i;
      for (int k = 0; k < 8; ++k) c = (c & 1) ? 0xEDB88320u ^ (c >> 1) : c >> 1;
      t[i] = c;
    }
    return t;
  }();
  std::uint32_t c = 0xFFFFFFFFu;
  auto p = static_cast<const unsigned char*>(data);
  for (std::size_t i = 0; i < n; ++i) c = table[(c ^ p[i]) & 0xFF] ^ (c >> 8);
  return c ^ 0xFFFFFFFFu;
}

Result<std::uint64_t> SequenceSidecar::read() const {
  int fd = ::open(path_.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) {
    if (errno == ENOENT) return std::uint64_t{0};
    return os_error("open " + path_, errno);
  }
  char buf[record_size + 1] = {};
  ssize_t n = ::read(fd, buf, record_size + 1);
  ::close(fd);
  if (n != ssize_t(record_size) || std::memcmp(buf, "tarn-seq 1 ", 11) != 0 ||
      buf[record_size - 1] != '\n')
    return Status(StoreErrc::damaged, path_ + ": not a sequence record");
  unsigned long long v = 0;
  unsigned crc = 0;
  if (std::sscanf(buf + 11, "%20llu %8x", &v, &crc) != 2 || crc != crc32_ieee(buf, crc_span))
    return Status(StoreErrc::damaged, path_ + ": sequence record fails its check");
  return std::uint64_t(v);
}

Status SequenceSidecar::write(std::uint64_t reserved_through) const {
  const std::string rec = make_record(reserved_through);
  const std::string tmp = path_ + ".tmp";
  int fd = ::open(tmp.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0644);
  Status s;
  if (fd >= 0) {
    s = write_and_sync(fd, rec, tmp);
    ::close(fd);
    if (s.ok() && ::rename(tmp.c_str(), path_.c_str()) != 0) s = os_error("rename " + tmp, errno);
    if (s.ok()) return sync_directory(std::filesystem::path(path_).parent_path().string());
    ::unlink(tmp.c_str());
  } else {
    s = os_error("create " + tmp, errno);
  }
  if (s.code() != StoreErrc::disk_full) return s;
  // Disk full: overwrite the existing record in place; it needs no new blocks.
  fd = ::open(path_.c_str(), O_WRONLY | O_CLOEXEC);
  if (fd < 0) return s;
  Status in_place = write_and_sync(fd, rec, path_);
  ::close(fd);
  return in_place.ok() ? in_place : s;
}

Status SequenceAllocator::start(std::uint64_t highest_elsewhere) {
  std::uint64_t from_sidecar = 0;
  auto r = sidecar_.read();
  if (r.ok()) {
    from_sidecar = r.value();
  } else {
    os::logger("store")->error(
        "sequence sidecar unusable ({}); continuing after the highest number "
        "the outbox and archive have seen ({})",
        r.error().describe(), highest_elsewhere);
  }
  std::uint64_t highest = std::max(highest_elsewhere, from_sidecar);
  next_ = highest + 1;
  skipped_first_ = highest_elsewhere + 1;
  skipped_last_ = from_sidecar > highest_elsewhere ? from_sidecar : highest_elsewhere;
  reserved_ = highest;  // nothing reserved for this run yet
  std::uint64_t want = next_ + block_ - 1;
  Status s = sidecar_.write(want);
  if (s.ok()) reserved_ = want;
  return s;
}

Result<std::uint64_t> SequenceAllocator::take() {
  if (next_ > reserved_) {
    std::uint64_t want = next_ + block_ - 1;
    Status s = sidecar_.write(want);
    if (!s.ok())
      return Status(StoreErrc::no_sequence, "cannot reserve sequence numbers: " + s.describe());
    reserved_ = want;
  }
  return next_++;
}

}  // namespace tarn::store
