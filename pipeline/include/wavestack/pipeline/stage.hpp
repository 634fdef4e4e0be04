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
#include <utility>
#include <vector>

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
  /// kind >= field. For a z-stack (planes > 0) the planes lie one below the
  /// other: field.data is (planes·h)×w and field.grid.plane is the first plane.
  Field field;
  std::size_t planes = 0;
  Image<float> phase;             ///< kind == phase: unwrapped phase (rad), same layout as field
  double distance = 0;            ///< reconstruction distance of this frame (m); NaN for a z-stack
  /// Values the stages record for this frame, one vector per declared
  /// RecordSpec (sized at plan time), and per-object rows for each declared
  /// TableSpec (flattened rows, cleared for every frame).
  std::vector<std::vector<double>> records;
  std::vector<std::vector<double>> table_rows;
  /// Focus found by an autofocus stage for this frame: the distance from the
  /// field's plane at that stage (m) and the absolute plane; NaN when unsure.
  double focus = 0;
  double focus_plane = 0;
  bool focus_valid = false;
};

/// A per-frame value (columns == 0) or row (columns > 0) that a stage writes
/// into the output file as a dataset of shape (N) or (N, columns).
struct RecordSpec {
  std::string name;       ///< dataset path, e.g. "focus/confidence"
  std::size_t columns = 0;
  std::string units;
  std::vector<std::pair<std::string, std::string>> attributes; ///< string attributes
};

/// A table of per-object rows (e.g. focus or dry mass per object), written
/// as a compound dataset and a CSV file beside the output. The engine adds a
/// first column "frame" (the source frame index).
struct TableSpec {
  std::string name;                 ///< dataset path, e.g. "focus/objects"
  std::vector<std::string> columns; ///< column names
  std::vector<bool> integer;        ///< per column: int64 instead of float64
  std::vector<std::string> units;   ///< per column
};

/// A dataset written once, e.g. the distances of a focus sweep.
struct ConstantSpec {
  std::string name;
  std::vector<double> values;
  std::string units;
};

/// What planning knows about the data at one point of the chain.
struct Shape {
  Kind kind = Kind::hologram;
  std::size_t height = 0, width = 0; ///< of one plane
  std::size_t planes = 0;            ///< > 0 for a z-stack
  Grid grid;
  bool plane_varies = false;         ///< the reconstruction distance differs per frame
  bool focus_available = false;      ///< an autofocus stage upstream sets FrameState::focus
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
  /// The background carried through the stages before the caller (e.g. its
  /// reconstructed field, to divide out as a reference), or nullptr when
  /// there is no background or in a dry run.
  virtual const FrameState* background_state() = 0;
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

  /// What this stage writes besides the image products (declared after plan()).
  virtual std::vector<RecordSpec> records() const { return {}; }
  virtual std::vector<TableSpec> tables() const { return {}; }
  virtual std::vector<ConstantSpec> constants() const { return {}; }
  /// True when frames must pass this stage one at a time, in order (e.g.
  /// focus tracking, which starts from the previous frame's result). The
  /// engine then gives it a serial filter of its own; the stage may still
  /// use parallelism inside one frame.
  virtual bool sequential() const { return false; }
  /// Called once before the first frame of a run (a tracking stage forgets
  /// what the planning probes taught it).
  virtual void reset() {}
  /// Extra PNG previews of a frame (e.g. a focus curve); append the paths.
  virtual void preview(const FrameState&, const std::string& folder, std::vector<std::string>& written) const {
    (void)folder;
    (void)written;
  }

  /// Slots of this stage's records and tables in FrameState (set by the engine).
  std::size_t record_base = 0, table_base = 0;

protected:
  std::vector<double>& record(FrameState& f, std::size_t i) const { return f.records[record_base + i]; }
  std::vector<double>& table(FrameState& f, std::size_t i) const { return f.table_rows[table_base + i]; }
};

} // namespace wavestack::pipeline
