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
const std::array<StageInfo, 9> registry{{
    {"fringe", "condition the hologram: background normalisation, DC suppression, apodization",
     "dc = \"mean\" | \"local\" | \"none\" (mean); apodize = \"none\" | \"tukey\" (none); "
     "tukey_fraction = 0..1 (0.1); local_window = pixels (auto)",
     stages::make_fringe},
    {"sideband", "find the carrier, mask the +1 or -1 order, re-centre and crop: hologram -> field",
     "order = \"auto\" | \"+1\" | \"-1\" (auto); radius = \"auto\" | fraction of the carrier distance "
     "(auto: NA/wavelength, else 1/3); soft_edge = fraction of the radius (0.1)",
     stages::make_sideband},
    {"propagate", "refocus the field: angular spectrum (band-limited, zero-padded), Fresnel or single-FFT Fresnel",
     "distance = \"<length>\"; padding = \"auto\" | \"none\" | factor; "
     "method = \"auto\" | \"angular-spectrum\" | \"fresnel\" | \"fresnel-single-fft\" (auto); "
     "or distances = { from, to, step } / a list for a z-stack; distance = \"focus\" after autofocus",
     stages::make_propagate},
    {"unwrap", "unwrap the phase of the field: field -> continuous phase (rad)",
     "method = \"reliability\" | \"least-squares\" (reliability); wrap_around = \"none\" | \"x\" | \"y\" | "
     "\"both\"; weights = \"none\" | \"amplitude\" | \"phase-variance\" (least squares); "
     "continuity = \"first-frame\" | \"none\"; residue_warning = residues per loop (0.001); "
     "mask = \"file.h5:/dataset\" (reliability: non-zero pixels are unwrapped, the others keep their wrapped value)",
     stages::make_unwrap},
    {"autofocus", "score a sweep of planes per frame and find the sharp one (the field stays; "
                  "propagate with distance = \"focus\" applies it)",
     "from, to, step = \"<length>\" (required); metric = \"auto\" | \"tamura-gradient\" | ... (auto); "
     "roi = [row, column, height, width]; track = true | false (false); window = planes (8); "
     "objects = true | false (false); refine_levels = 0..20 (5); min_snr (12); "
     "taper_fraction = 0..0.45 (0.1, soft window at the frame border)",
     stages::make_autofocus},
    {"reference", "divide the field by the reconstructed object-free background: removes the instrument's wavefront",
     "divide = \"field\" | \"phase\" (field); amplitude_floor = fraction of the mean (0.05); needs [input] background",
     stages::make_reference},
    {"flatten", "fit and subtract the instrument's tilt and curvature over the background of the unwrapped phase",
     "model = \"polynomial\" | \"zernike\" (polynomial); degree = 0..8 (2); terms = [ANSI indices] (zernike); "
     "region = \"auto\" | \"all\" | \"mask\" (auto: objects excluded per frame); mask = \"file.h5:/dataset\" "
     "(non-zero = background, size of the phase maps)",
     stages::make_flatten},
    {"zernike", "wavefront report of the unwrapped phase: ANSI Zernike coefficients (nm), PV, RMS, Strehl",
     "terms = 3..231 (15); center_row, center_column, radius = pixels (default: largest inscribed circle)",
     stages::make_zernike},
    {"drymass", "segment objects on the OPD map; area, OPD and dry mass per object",
     "threshold = \"robust\" | \"fixed\" | \"otsu\" (robust); threshold_opd = \"<length>\" (fixed); "
     "sigmas (5); min_area_pixels (20); fill_holes; exclude_border; alpha = um^3/pg (0.19)",
     stages::make_drymass},
}};
} // namespace

std::span<const StageInfo> stage_registry() { return registry; }

const StageInfo* find_stage(std::string_view type) {
  for (const StageInfo& s : registry)
    if (s.type == type) return &s;
  return nullptr;
}

} // namespace wavestack::pipeline
