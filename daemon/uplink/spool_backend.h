// The "spool" backend: each packet becomes one file in a directory, for
// another uploader or an SD card collected on the next visit.
//   <dir>/<station>-<sequence, 12 digits>-<kind>.pkt   e.g. hollin-buoy-1-000000000042-data.pkt
// (kind is the mqtt topic suffix). Names sort by sequence; the file holds the
// packet bytes only. A packet is written to "<dir>/.<name>.tmp", fsync'ed,
// renamed to its name and the directory fsync'ed; only then is it
// acknowledged. A reader must ignore names starting with '.'; the uploader
// deletes (or moves away) the files it has taken.
// Options: dir (required: an existing writable directory), max_files (files of
// this station in the directory; when reached, sends are not acknowledged and
// the packets stay in the outbox), mtu.
// Thread-safety: io_context thread only (see backend.h).
#pragma once

#include "daemon/uplink/backend.h"

namespace tarn::uplink {

struct SpoolOptions {
  std::string dir;
  std::int64_t max_files = 100000;
  std::size_t mtu = 65535;
};

// Checks the options; never creates a file or opens a port or socket.
SpoolOptions read_spool_options(const config::StationConfig& cfg, config::Problems& problems);
// "<station>-<seq:012>-<suffix>.pkt"
std::string spool_file_name(const std::string& station, std::uint64_t sequence, PacketKind kind);
BackendFactory spool_backend_factory();

}  // namespace tarn::uplink
