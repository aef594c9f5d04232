// The "store" block of the station config, validated by its owner (the store).
//
//   "store": {
//     "budget_mb": 256,                    // outbox + archive pages in use, MiB (>= 1)
//     "when_full": "drop_oldest_normal",   // or "thin_archive_first" (see station_store.h)
//     "reclaim_on_disk_full": true,        // apply when_full also when the disk is full
//     "sent_retention_days": 7,            // acknowledged packets kept for resends
//     "archive_retention_days": 400,       // archived samples kept this long
//     "archive_max_mb": 512,               // and the archive under this size
//     "holding_packets": 1000,             // in-memory bounds while the disk refuses writes
//     "holding_samples": 100000
//   }
// Every key is optional; the values above are the defaults. The files live in
// paths.state_dir (outbox.db, outbox.db.seq, archive.db).
//
// Thread-safety: pure function.
#pragma once

#include <string>

#include "config/json_reader.h"
#include "daemon/store/station_store.h"

namespace tarn::store {

// `block` may be null (no "store" key: defaults). Problems are added under `pointer`.
StationStoreOptions read_store_config(const config::Json* block, const std::string& pointer,
                                      config::Problems& problems);

}  // namespace tarn::store
