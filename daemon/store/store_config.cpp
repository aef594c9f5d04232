#include "daemon/store/store_config.h"

#include <cmath>

namespace tarn::store {

StationStoreOptions read_store_config(const config::Json* block, const std::string& pointer,
                                      config::Problems& problems) {
  StationStoreOptions o;
  if (!block || block->is_null()) return o;
  config::ObjectReader r(*block, pointer, problems);
  if (!r.valid()) return o;
  double budget_mb = double(o.limits.budget_bytes) / (1 << 20);
  if (r.number("budget_mb", budget_mb, 1, 1024 * 1024))
    o.limits.budget_bytes = std::int64_t(std::llround(budget_mb * (1 << 20)));
  std::string policy;
  if (r.one_of("when_full", policy, {"drop_oldest_normal", "thin_archive_first"}))
    o.limits.policy = *parse_policy(policy);
  r.boolean("reclaim_on_disk_full", o.limits.reclaim_on_disk_full);
  double days = double(o.outbox.sent_retention_s) / 86400;
  if (r.number("sent_retention_days", days, 0, 3650))
    o.outbox.sent_retention_s = std::int64_t(std::llround(days * 86400));
  days = double(o.archive.max_age_s) / 86400;
  if (r.number("archive_retention_days", days, 1, 36500))
    o.archive.max_age_s = std::int64_t(std::llround(days * 86400));
  double archive_mb = double(o.archive.max_bytes) / (1 << 20);
  if (r.number("archive_max_mb", archive_mb, 1, 1024 * 1024))
    o.archive.max_bytes = std::int64_t(std::llround(archive_mb * (1 << 20)));
  std::int64_t n = std::int64_t(o.outbox.holding_max_packets);
  if (r.integer("holding_packets", n, 1, 1000000)) o.outbox.holding_max_packets = std::size_t(n);
  n = std::int64_t(o.archive.holding_max_samples);
  if (r.integer("holding_samples", n, 1, 100000000)) o.archive.holding_max_samples = std::size_t(n);
  r.finish();
  if (o.archive.max_bytes > o.limits.budget_bytes && r.has("archive_max_mb") && r.has("budget_mb"))
    problems.add(r.pointer_of("archive_max_mb"),
                 "archive_max_mb is larger than budget_mb; allowed: at most budget_mb");
  return o;
}

}  // namespace tarn::store
