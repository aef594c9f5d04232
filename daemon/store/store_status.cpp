#include "daemon/store/store_status.h"

namespace tarn::store {

std::string_view errc_name(StoreErrc c) {
  switch (c) {
    case StoreErrc::ok:
      return "ok";
    case StoreErrc::disk_full:
      return "disk_full";
    case StoreErrc::read_only:
      return "read_only";
    case StoreErrc::busy:
      return "busy";
    case StoreErrc::damaged:
      return "damaged";
    case StoreErrc::io:
      return "io";
    case StoreErrc::not_found:
      return "not_found";
    case StoreErrc::invalid:
      return "invalid";
    case StoreErrc::no_sequence:
      return "no_sequence";
  }
  return "unknown";
}

std::string Status::describe() const {
  if (ok()) return "ok";
  std::string s(errc_name(code_));
  if (!message_.empty()) s += ": " + message_;
  return s;
}

}  // namespace tarn::store
