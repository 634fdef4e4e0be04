#pragma once
// The stage registry: one table maps a `type` string to its factory, a
// one-line summary and its accepted keys. Building a pipeline, `check`'s key
// validation and the stage list in --help all come from this table.
#include "wavestack/pipeline/params.hpp"
#include "wavestack/pipeline/stage.hpp"

#include <functional>
#include <memory>
#include <span>
#include <string_view>

namespace wavestack::pipeline {

struct StageInfo {
  std::string_view type;
  std::string_view summary;
  std::string_view keys; ///< accepted keys with their defaults, for --help
  std::function<std::unique_ptr<Stage>(Params&)> make;
};

std::span<const StageInfo> stage_registry();
const StageInfo* find_stage(std::string_view type);

} // namespace wavestack::pipeline
