// Shared helpers for the store tests: a temporary directory under /tmp and
// small packet/sample builders. Test code only.
#pragma once

#include <sys/mount.h>
#include <unistd.h>

#include <cstdint>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <stdexcept>
#include <string>
#include <vector>

#include "daemon/store/station_store.h"

namespace tarn::store::testing {

class TempDir {
 public:
  TempDir() {
    std::string tmpl = "/tmp/tarn-store-test-XXXXXX";
    if (!::mkdtemp(tmpl.data())) throw std::runtime_error("mkdtemp failed");
    path_ = tmpl;
  }
  ~TempDir() {
    std::error_code ec;
    std::filesystem::remove_all(path_, ec);
  }
  TempDir(const TempDir&) = delete;
  TempDir& operator=(const TempDir&) = delete;
  const std::string& path() const { return path_; }
  std::string file(const std::string& name) const { return path_ + "/" + name; }

 private:
  std::string path_;
};

// A tmpfs of `size` mounted on a fresh directory, when running as root and the
// kernel allows it; else ok() is false and reason() says why.
class SmallFileSystem {
 public:
  explicit SmallFileSystem(const std::string& size) {
    if (::geteuid() != 0) {
      reason_ = "not running as root";
      return;
    }
    if (::mount("tarn-test", dir_.path().c_str(), "tmpfs", 0, ("size=" + size).c_str()) != 0) {
      reason_ = std::string("mount -t tmpfs failed: ") + std::strerror(errno);
      return;
    }
    mounted_ = true;
  }
  ~SmallFileSystem() {
    if (mounted_) ::umount2(dir_.path().c_str(), MNT_DETACH);
  }
  bool ok() const { return mounted_; }
  const std::string& reason() const { return reason_; }
  const std::string& path() const { return dir_.path(); }
  bool remount(bool read_only, const std::string& size) {
    unsigned long flags = MS_REMOUNT | (read_only ? MS_RDONLY : 0);
    return ::mount("tarn-test", dir_.path().c_str(), "tmpfs", flags, ("size=" + size).c_str()) == 0;
  }

 private:
  TempDir dir_;
  bool mounted_ = false;
  std::string reason_;
};

// Packet bytes that name their sequence number and a tag, so content can be compared.
inline PacketSource tagged(std::string tag) {
  return [tag](std::uint64_t seq) {
    std::string s = tag + "#" + std::to_string(seq);
    return std::vector<std::uint8_t>(s.begin(), s.end());
  };
}

inline std::string text(const std::vector<std::uint8_t>& b) {
  return std::string(b.begin(), b.end());
}

inline std::vector<ArchivedSample> poll_cycle(std::int64_t t, int channels = 4) {
  std::vector<ArchivedSample> v;
  for (int c = 0; c < channels; ++c)
    v.push_back(ArchivedSample{"ch" + std::to_string(c), t, 1.5 + c + double(t % 1000) / 1000.0,
                               codec::Flag::pass, 0});
  return v;
}

inline OutboxOptions quiet_outbox() {
  OutboxOptions o;
  o.sequence_block = 8;
  return o;
}

}  // namespace tarn::store::testing
