#pragma once
// A stage: one step of the per-frame chain. It declares what it consumes and
// produces, validates its own table of the pipeline file when it is built
// (Params::finish rejects unknown keys), plans once (computes its output
// shape and grid, makes FFT plans and lookup tables), and then processes one
// frame at a time in parallel with other frames, using only its per-thread
// Workspace — no allocation per frame.
#include "wavestack/core/field.hpp"
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"

#include <cstdint>
#include <map>
#include <memory>
#include <optional>
#include <string>
#include <string_view>

namespace wavestack::pipeline {

/// What flows between stages.
enum class Kind { hologram, field, phase };
std::string_view kind_name(Kind k);

/// Instrument description in physical units (object space is derived).
struct Instrument {
  double wavelength = 0;         ///< vacuum wavelength (m)
  double pixel_pitch = 0;        ///< camera pixel pitch (m)
  double magnification = 1;      ///< lateral magnification onto the camera
  double numerical_aperture = 0; ///< 0 = unknown
  double medium_index = 1;
  /// Optional carrier named by the profile, in object-space cycles/m (fy, fx).
  std::optional<std::pair<double, double>> carrier;

  double object_pitch() const noexcept { return pixel_pitch / magnification; }
  Grid grid() const noexcept {
    Grid g;
    g.dy = g.dx = object_pitch();
    g.wavelength = wavelength;
    g.medium_index = medium_index;
    return g;
  }
};

/// Text attributes a stage contributes to the output file (e.g. the carrier found).
using Notes = std::map<std::string, std::string>;

/// The state of one frame as it moves through the chain. Buffers are sized
/// once at plan time and reused for every frame the token carries.
struct FrameState {
  std::int64_t source_index = -1; ///< index in the input dataset
  std::size_t output_index = 0;   ///< index in the output file
  Kind kind = Kind::hologram;
  Image<float> hologram;          ///< kind == hologram
  Field field;                    ///< kind >= field
  Image<float> phase;             ///< kind == phase: unwrapped phase (rad)
  double distance = 0;            ///< reconstruction distance of this frame (m)
};

/// What planning knows about the data at one point of the chain.
struct Shape {
  Kind kind = Kind::hologram;
  std::size_t height = 0, width = 0;
  Grid grid;
};

/// Read-only facts a stage may use while planning.
class PlanContext {
public:
  virtual ~PlanContext() = default;
  virtual const Instrument& instrument() const = 0;
  /// True for `wavestack check`: no frames may be read, so a stage that
  /// needs data to plan must say what it will do instead.
  virtual bool dry_run() const = 0;
  /// A hologram to plan from (the background when given, else the first
  /// selected frame), conditioned by the stages before the caller. Throws in
  /// a dry run.
  virtual const Image<float>& probe_hologram() = 0;
  /// The raw object-free background hologram, or nullptr.
  virtual const Image<float>* background() = 0;
};

/// Per-thread scratch memory of one stage.
struct StageWorkspace {
  virtual ~StageWorkspace() = default;
};

class Stage {
public:
  virtual ~Stage() = default;
  virtual std::string_view type() const = 0;
  virtual Kind consumes() const = 0;
  virtual Kind produces() const = 0;

  /// Plan for input `in`; return the output shape. Called once, in order.
  virtual Shape plan(const Shape& in, PlanContext& ctx) = 0;
  /// Allocate this stage's scratch buffers for one thread.
  virtual std::unique_ptr<StageWorkspace> make_workspace() const { return nullptr; }
  /// Process one frame in place. Must not allocate.
  virtual void process(FrameState& frame, StageWorkspace* ws) const = 0;
  /// Facts worth recording in the output file, available after plan().
  virtual Notes notes() const { return {}; }
  /// The reconstruction distance this stage adds (propagate), if fixed.
  virtual std::optional<double> fixed_distance() const { return std::nullopt; }
};

} // namespace wavestack::pipeline
