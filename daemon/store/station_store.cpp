#include "daemon/store/station_store.h"

#include <spdlog/spdlog.h>

#include <filesystem>
#include <sstream>

#include "drivers/os/utc_text.h"

namespace tarn::store {
namespace fs = std::filesystem;

namespace {

constexpr std::int64_t packet_chunk = 8;    // packets per reclaim step
constexpr std::int64_t sample_chunk = 256;  // samples per reclaim step
constexpr int max_steps = 2000;             // per enforce_budget call: bounds one call's time

std::string fault_words(const Status& s) {
  switch (s.code()) {
    case StoreErrc::disk_full:
      return "disk full";
    case StoreErrc::read_only:
      return "read-only file system";
    case StoreErrc::no_sequence:
      return "sequence numbers cannot be reserved";
    case StoreErrc::busy:
      return "store file locked by another process";
    case StoreErrc::damaged:
      return "store file damaged";
    default:
      return "write error";
  }
}

std::string bytes_text(std::int64_t n) {
  char buf[64];
  if (n >= (1ll << 20))
    std::snprintf(buf, sizeof buf, "%.1f MiB", double(n) / (1 << 20));
  else if (n >= 1024)
    std::snprintf(buf, sizeof buf, "%.1f KiB", double(n) / 1024);
  else
    std::snprintf(buf, sizeof buf, "%lld B", static_cast<long long>(n));
  return buf;
}

}  // namespace

std::string_view policy_name(BudgetPolicy p) {
  return p == BudgetPolicy::drop_oldest_normal ? "drop_oldest_normal" : "thin_archive_first";
}

std::optional<BudgetPolicy> parse_policy(std::string_view name) {
  if (name == "drop_oldest_normal") return BudgetPolicy::drop_oldest_normal;
  if (name == "thin_archive_first") return BudgetPolicy::thin_archive_first;
  return std::nullopt;
}

StorePaths locate_store(const std::string& arg) {
  StorePaths p;
  p.given = arg;
  std::error_code ec;
  if (fs::is_directory(arg, ec)) {
    p.dir = arg;
  } else {
    p.dir = fs::path(arg).parent_path().string();
    if (p.dir.empty()) p.dir = ".";
  }
  p.outbox = (fs::path(p.dir) / "outbox.db").string();
  p.archive = (fs::path(p.dir) / "archive.db").string();
  return p;
}

// ---- StationStore ----

StationStore::StationStore(StationStoreOptions options, std::unique_ptr<OutboxStore> outbox,
                           std::unique_ptr<ArchiveStore> archive)
    : options_(std::move(options)), outbox_(std::move(outbox)), archive_(std::move(archive)) {}

Result<std::unique_ptr<StationStore>> StationStore::open(const std::string& dir,
                                                         const StationStoreOptions& options,
                                                         std::int64_t now) {
  StorePaths paths = locate_store(dir);
  paths.dir = dir;
  paths.outbox = (fs::path(dir) / "outbox.db").string();
  paths.archive = (fs::path(dir) / "archive.db").string();
  auto archive = ArchiveStore::open(paths.archive, options.archive, now);
  if (!archive.ok()) return archive.error();
  auto floor = archive.value()->recorded_highest_sequence();
  auto outbox =
      OutboxStore::open(paths.outbox, options.outbox, floor.ok() ? floor.value() : 0, now);
  if (!outbox.ok()) return outbox.error();
  archive.value()->note_highest_sequence(outbox.value()->highest_sequence());
  std::unique_ptr<StationStore> s(
      new StationStore(options, std::move(outbox.value()), std::move(archive.value())));
  os::logger("store")->info("store open in {}: next packet sequence {}, budget {}, policy {}", dir,
                            s->outbox_->next_sequence(), bytes_text(options.limits.budget_bytes),
                            policy_name(options.limits.policy));
  return s;
}

Result<std::int64_t> StationStore::used_bytes() {
  auto a = outbox_->used_bytes();
  if (!a.ok()) return a.error();
  auto b = archive_->used_bytes();
  if (!b.ok()) return b.error();
  return a.value() + b.value();
}

Result<std::int64_t> StationStore::reclaim_step() {
  auto sent = outbox_->drop_oldest_sent(packet_chunk);
  if (!sent.ok() || sent.value() > 0) return sent;
  auto drop_packets = [&]() -> Result<std::int64_t> {
    auto n = outbox_->drop_oldest_unsent_normal(packet_chunk);
    if (n.ok() && n.value() > 0) drops_since_notice_[counter::dropped_unsent_normal] += n.value();
    return n;
  };
  auto drop_samples = [&]() -> Result<std::int64_t> {
    auto n = archive_->drop_oldest_samples(sample_chunk);
    if (n.ok() && n.value() > 0) drops_since_notice_[counter::dropped_archive_samples] += n.value();
    return n;
  };
  bool packets_first = options_.limits.policy == BudgetPolicy::drop_oldest_normal;
  auto first = packets_first ? drop_packets() : drop_samples();
  if (!first.ok() || first.value() > 0) return first;
  return packets_first ? drop_samples() : drop_packets();
}

Status StationStore::enforce_budget(std::int64_t now) {
  for (int step = 0; step < max_steps; ++step) {
    auto used = used_bytes();
    if (!used.ok()) return used.error();
    if (used.value() <= options_.limits.budget_bytes) {
      over_budget_with_alerts_only_ = false;
      break;
    }
    auto n = reclaim_step();
    if (!n.ok()) return n.error();
    if (n.value() == 0) {
      over_budget_with_alerts_only_ = true;
      if (alerts_only_notice_.due(now))
        os::logger("store")->error(
            "store over its budget ({} used of {}) with nothing left to drop "
            "but unsent alerts; raise the budget or free the link",
            bytes_text(used.value()), bytes_text(options_.limits.budget_bytes));
      break;
    }
  }
  log_notices(now);
  return {};
}

void StationStore::after_fault(std::int64_t now) {
  bool full = outbox_->write_fault().code() == StoreErrc::disk_full ||
              archive_->write_fault().code() == StoreErrc::disk_full;
  if (full && options_.limits.reclaim_on_disk_full) {
    // Freed pages are reused by SQLite without growing the file.
    for (int i = 0; i < 4; ++i) {
      auto n = reclaim_step();
      if (!n.ok() || n.value() == 0) break;
      if (outbox_->retry_held().ok() && archive_->retry_held().ok()) break;
    }
  }
  log_notices(now);
}

InsertReceipt StationStore::insert_packet(const PacketSource& source, Priority priority,
                                          PacketKind kind, std::int64_t created_t,
                                          std::int64_t now) {
  enforce_budget(now);
  InsertReceipt r = outbox_->insert(source, priority, kind, created_t);
  if (r.sequence) archive_->note_highest_sequence(*r.sequence);
  if (r.where != InsertReceipt::Where::stored) after_fault(now);
  if (r.where == InsertReceipt::Where::dropped)
    drops_since_notice_[counter::dropped_held_normal] += 1;
  return r;
}

AppendReceipt StationStore::append_samples(std::vector<ArchivedSample> batch, std::int64_t now) {
  enforce_budget(now);
  AppendReceipt r = archive_->append(std::move(batch));
  if (r.dropped > 0) drops_since_notice_[counter::dropped_held_samples] += std::int64_t(r.dropped);
  if (!r.stored) after_fault(now);
  return r;
}

void StationStore::maintain(std::int64_t now) {
  outbox_->retry_held();
  archive_->retry_held();
  if (degraded()) after_fault(now);
  if (last_prune_ == INT64_MIN || now < last_prune_ ||
      now - last_prune_ >= options_.prune_interval_s) {
    auto a = outbox_->prune_sent(now);
    auto b = archive_->prune(now);
    if (a.ok() && b.ok()) last_prune_ = now;
  }
  enforce_budget(now);
}

bool StationStore::degraded() const {
  return !outbox_->write_fault().ok() || !archive_->write_fault().ok() ||
         outbox_->held_packets() > 0 || outbox_->held_acks() > 0 || archive_->held_samples() > 0;
}

std::string StationStore::condition() const {
  if (!degraded())
    return over_budget_with_alerts_only_ ? "ok (over budget: only alerts left)" : "ok";
  const Status& f = !outbox_->write_fault().ok() ? outbox_->write_fault() : archive_->write_fault();
  std::ostringstream o;
  o << "degraded: " << (f.ok() ? std::string("catching up") : fault_words(f)) << ", holding "
    << outbox_->held_packets() << " packets and " << archive_->held_samples()
    << " samples in memory";
  if (outbox_->held_acks() > 0) o << " (and " << outbox_->held_acks() << " acknowledgements)";
  return o.str();
}

void StationStore::log_notices(std::int64_t now) {
  bool deg = degraded();
  if (deg != was_degraded_) {
    if (deg)
      os::logger("store")->warn("store {}", condition());
    else
      os::logger("store")->info("store writable again; nothing held in memory");
    was_degraded_ = deg;
  } else if (deg && fault_notice_.due(now)) {
    os::logger("store")->warn("store still {}", condition());
  }
  if (!drops_since_notice_.empty() && drop_notice_.due(now)) {
    std::string what;
    for (auto& [name, n] : drops_since_notice_)
      what += (what.empty() ? "" : ", ") + name + " " + std::to_string(n);
    os::logger("store")->warn(
        "store dropped data under policy {} (budget {}): {} since the last notice; "
        "totals in `tarn store stats`",
        policy_name(options_.limits.policy), bytes_text(options_.limits.budget_bytes), what);
    drops_since_notice_.clear();
  }
}

StoreStats StationStore::stats() {
  StoreStats s;
  s.outbox_path = outbox_->path();
  s.archive_path = archive_->path();
  s.outbox_present = s.archive_present = true;
  if (auto c = outbox_->counts(); c.ok()) s.outbox = c.value();
  if (auto c = archive_->counts(); c.ok()) s.archive = c.value();
  if (auto u = outbox_->used_bytes(); u.ok()) s.outbox_used_bytes = u.value();
  if (auto u = archive_->used_bytes(); u.ok()) s.archive_used_bytes = u.value();
  s.outbox_file_bytes = outbox_->file_bytes();
  s.archive_file_bytes = archive_->file_bytes();
  s.budget_bytes = options_.limits.budget_bytes;
  s.policy = std::string(policy_name(options_.limits.policy));
  s.next_sequence = outbox_->next_sequence();
  s.counters = outbox_->counters();
  for (auto& [k, v] : archive_->counters()) s.counters[k] += v;
  s.held_packets = outbox_->held_packets();
  s.held_acks = outbox_->held_acks();
  s.held_samples = archive_->held_samples();
  s.condition = condition();
  for (const OpenReport* r : {&outbox_->open_report(), &archive_->open_report()})
    if (!r->moved_aside_to.empty())
      s.notes.push_back("damaged file moved aside at start: " + r->moved_aside_to + " (" +
                        r->damage + ")");
  return s;
}

// ---- read-only, for the field tools ----

Result<StoreStats> read_store_stats(const StorePaths& paths) {
  StoreStats s;
  s.outbox_path = paths.outbox;
  s.archive_path = paths.archive;
  std::error_code ec;
  s.outbox_present = fs::exists(paths.outbox, ec);
  s.archive_present = fs::exists(paths.archive, ec);
  if (!s.outbox_present && !s.archive_present)
    return Status(StoreErrc::not_found,
                  "no store at " + (paths.given.empty() ? paths.dir : paths.given) + ": neither " +
                      paths.outbox + " nor " + paths.archive +
                      " exists; allowed: the store directory (paths.state_dir) or one of its "
                      "files");
  auto file_bytes = [](const std::string& p) {
    std::int64_t total = 0;
    std::error_code e;
    for (const char* suffix : {"", "-wal", "-shm"}) {
      auto n = fs::file_size(p + suffix, e);
      if (!e) total += std::int64_t(n);
    }
    return total;
  };
  if (s.outbox_present) {
    auto db = SqliteDb::open(paths.outbox, SqliteDb::Mode::read_only);
    if (!db.ok()) return db.error();
    auto c = read_outbox_counts(db.value());
    if (!c.ok()) return c.error();
    s.outbox = c.value();
    if (auto u = used_bytes(db.value()); u.ok()) s.outbox_used_bytes = u.value();
    if (auto k = read_counters(db.value()); k.ok()) s.counters = k.value();
    s.outbox_file_bytes = file_bytes(paths.outbox);
    auto seq = SequenceSidecar(paths.outbox + ".seq").read();
    if (seq.ok() && seq.value() > 0)
      s.notes.push_back("sequence numbers reserved through " + std::to_string(seq.value()));
  }
  if (s.archive_present) {
    auto db = SqliteDb::open(paths.archive, SqliteDb::Mode::read_only);
    if (!db.ok()) return db.error();
    auto c = read_archive_counts(db.value());
    if (!c.ok()) return c.error();
    s.archive = c.value();
    if (auto u = used_bytes(db.value()); u.ok()) s.archive_used_bytes = u.value();
    if (auto k = read_counters(db.value()); k.ok())
      for (auto& [name, v] : k.value()) s.counters[name] += v;
    s.archive_file_bytes = file_bytes(paths.archive);
  }
  s.condition = "read from the files (memory-held data shows in `tarn status`)";
  for (auto it = fs::directory_iterator(paths.dir, ec); !ec && it != fs::directory_iterator();
       it.increment(ec))
    if (it->path().filename().string().find(".damaged-") != std::string::npos &&
        it->path().extension() != ".db-wal")
      s.notes.push_back("damaged file kept aside: " + it->path().string());
  return s;
}

std::string format_stats(const StoreStats& s) {
  std::ostringstream o;
  auto when = [](const std::optional<std::int64_t>& t) {
    return t ? os::format_utc(*t) : std::string("-");
  };
  o << "condition:        " << s.condition << "\n";
  if (s.outbox_present) {
    o << "outbox:           " << s.outbox_path << " (" << bytes_text(s.outbox_used_bytes)
      << " in use, " << bytes_text(s.outbox_file_bytes) << " on disk)\n";
    o << "  unsent:         " << s.outbox.unsent << " packets, " << s.outbox.unsent_bytes
      << " bytes, " << s.outbox.unsent_alerts << " alerts\n";
    o << "  oldest unsent:  " << when(s.outbox.oldest_unsent_created_t) << "\n";
    o << "  sent, kept:     " << s.outbox.sent_kept << " packets, " << s.outbox.sent_kept_bytes
      << " bytes\n";
    o << "  sequence:       highest " << s.outbox.highest_sequence;
    if (s.next_sequence > 0) o << ", next " << s.next_sequence;
    o << "\n";
  } else {
    o << "outbox:           " << s.outbox_path << " (missing)\n";
  }
  if (s.archive_present) {
    o << "archive:          " << s.archive_path << " (" << bytes_text(s.archive_used_bytes)
      << " in use, " << bytes_text(s.archive_file_bytes) << " on disk)\n";
    o << "  samples:        " << s.archive.samples << " in " << s.archive.channels << " channels, "
      << when(s.archive.oldest_t) << " .. " << when(s.archive.newest_t) << "\n";
    o << "  maintenance:    " << s.archive.maintenance_periods << " periods\n";
  } else {
    o << "archive:          " << s.archive_path << " (missing)\n";
  }
  if (s.budget_bytes > 0)
    o << "budget:           " << bytes_text(s.outbox_used_bytes + s.archive_used_bytes) << " of "
      << bytes_text(s.budget_bytes) << ", policy " << s.policy << "\n";
  if (s.held_packets + s.held_samples + s.held_acks > 0)
    o << "in memory:        " << s.held_packets << " packets, " << s.held_acks
      << " acknowledgements, " << s.held_samples << " samples\n";
  std::int64_t drops = 0;
  for (auto& [k, v] : s.counters)
    if (k.rfind("dropped.", 0) == 0) drops += v;
  o << "drops:            " << drops << " in all\n";
  for (auto& [k, v] : s.counters) o << "  " << k << ": " << v << "\n";
  for (auto& n : s.notes) o << "note:             " << n << "\n";
  return o.str();
}

}  // namespace tarn::store
