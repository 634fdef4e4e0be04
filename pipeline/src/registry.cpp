#include "wavestack/pipeline/registry.hpp"

#include "stages/stages.hpp"

#include <array>

namespace wavestack::pipeline {

std::string_view kind_name(Kind k) {
  switch (k) {
  case Kind::hologram: return "hologram";
  case Kind::field: return "field";
  case Kind::phase: return "phase";
  }
  return "?";
}

namespace {
// One line per stage: type, summary, keys (with defaults), factory.
const std::array<StageInfo, 3> registry{{
    {"fringe", "condition the hologram: background normalisation, DC suppression, apodization",
     "dc = \"mean\" | \"local\" | \"none\" (mean); apodize = \"none\" | \"tukey\" (none); "
     "tukey_fraction = 0..1 (0.1); local_window = pixels (auto)",
     stages::make_fringe},
    {"sideband", "find the carrier, mask the +1 or -1 order, re-centre and crop: hologram -> field",
     "order = \"auto\" | \"+1\" | \"-1\" (auto); radius = \"auto\" | fraction of the carrier distance "
     "(auto: NA/wavelength, else 1/3); soft_edge = fraction of the radius (0.1)",
     stages::make_sideband},
    {"propagate", "refocus the field by the angular spectrum method (band-limited, zero-padded)",
     "distance = \"<length>\"; padding = \"auto\" | \"none\" | factor (auto = 2); "
     "method = \"angular-spectrum\"",
     stages::make_propagate},
}};
} // namespace

std::span<const StageInfo> stage_registry() { return registry; }

const StageInfo* find_stage(std::string_view type) {
  for (const StageInfo& s : registry)
    if (s.type == type) return &s;
  return nullptr;
}

} // namespace wavestack::pipeline
