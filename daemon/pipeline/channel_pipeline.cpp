#include "daemon/pipeline/channel_pipeline.h"

#include <limits>

namespace tarn::pipeline {

ChannelPipeline::ChannelPipeline(ChannelConfig config)
    : name_(std::move(config.name)),
      qc_(std::move(config.qc)),
      windows_(config.window, qc_.poll_interval_s()) {}

void ChannelPipeline::Forward::on_sample(const FlaggedSample& s) {
  out_.samples.push_back(s);
  p_.windows_.push(s, out_.windows);
}

void ChannelPipeline::Forward::on_break(std::int64_t last_before, std::int64_t first_after) {
  p_.windows_.stop(last_before + p_.qc_.poll_interval_s(), out_.windows);
  p_.windows_.start(first_after, out_.windows);
}

void ChannelPipeline::sync_windows(Output& out) {
  const std::int64_t t = qc_.delivered_before();
  if (t != std::numeric_limits<std::int64_t>::min()) windows_.advance(t, out.windows);
}

void ChannelPipeline::start(std::int64_t t, Output& out) {
  windows_.start(t, out.windows);
}

void ChannelPipeline::push(const RawSample& raw, Output& out) {
  Forward f(*this, out);
  qc_.push(raw, f);
  sync_windows(out);
}

void ChannelPipeline::advance(std::int64_t now, Output& out) {
  Forward f(*this, out);
  qc_.advance(now, f);
  sync_windows(out);
}

void ChannelPipeline::settle_held(Output& out) {
  Forward f(*this, out);
  qc_.finish(f);
  sync_windows(out);
}

void ChannelPipeline::stop(std::int64_t t, Output& out) {
  Forward f(*this, out);
  qc_.finish(f);
  windows_.stop(t, out.windows);
}

void ChannelPipeline::restore(const ChannelSnapshot& s) {
  qc_.restore(s.qc);
  windows_.restore(s.last_closed_end);
}

std::size_t ChannelPipeline::state_bytes() const {
  return sizeof(*this) - sizeof(qc_) - sizeof(windows_) + name_.capacity() + qc_.state_bytes() +
         windows_.state_bytes();
}

}  // namespace tarn::pipeline
