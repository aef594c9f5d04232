// The settings of one channel's pipeline: its QC tests and its window
// settings, as the config reads them (config/pipeline_config.h) and the
// pipeline's ChannelPipeline (daemon/pipeline/channel_pipeline.h) runs them.
// Pure data; standard library only.
#pragma once

#include <string>

#include "config/settings/qc_params.h"
#include "config/settings/window_settings.h"

namespace tarn::pipeline {

struct ChannelConfig {
  std::string name;
  QcConfig qc;
  WindowConfig window;
};

}  // namespace tarn::pipeline
