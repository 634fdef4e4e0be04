#pragma once
// The engine: plans a loaded pipeline once (opens the input's metadata,
// checks each stage's input kind exists upstream, computes every shape and
// grid, makes FFT plans), then streams frames through a TBB pipeline:
//   read (serial, in order) -> process (parallel) -> write (serial, in order)
// with a bounded number of frames in flight. Errors from any filter cancel
// the run and surface at one place with the frame and dataset added.
#include "wavestack/pipeline/config.hpp"
#include "wavestack/pipeline/stage.hpp"

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

namespace wavestack::pipeline {

struct PlanSummary {
  std::int64_t source_frames = 0;       ///< frames in the input dataset
  std::size_t height = 0, width = 0;    ///< input frame size
  std::string dtype;                    ///< input element type
  std::vector<std::int64_t> frames;     ///< selected source indices
  std::string selection;                ///< the selection as text ("0:100"), after --frames
  /// Identifies the input data (shape, type, checksum of sample frames), so
  /// that --resume and merge can tell the same input from another.
  std::string source_fingerprint;
  std::vector<Shape> shapes;            ///< output shape of each stage
  Shape output;                         ///< shape written to the file
  Notes notes;                          ///< what the stages decided (carrier, radius, ...)
  std::vector<RecordSpec> records;      ///< per-frame values of all stages, in slot order
  std::vector<TableSpec> tables;        ///< per-object tables of all stages, in slot order
  std::vector<ConstantSpec> constants;  ///< datasets written once
};

struct RunSettings {
  int threads = 0;          ///< 0 = the [run] table or all cores
  int tokens = 0;           ///< frames in flight; 0 = the [run] table or 2 × threads
  bool progress = false;    ///< print progress on stderr
  std::string frames;       ///< --frames A:B override, empty = the file's selection
  bool resume = false;      ///< continue the partial output of an interrupted run
};

struct RunReport {
  std::size_t frames = 0;      ///< frames written by this run
  std::size_t resumed_at = 0;  ///< first frame written (0 unless resumed)
  double seconds = 0;
  std::string output;
  std::vector<std::string> previews;
  std::vector<std::string> tables; ///< CSV files beside the output
};

class Engine {
public:
  explicit Engine(Pipeline& pipeline);
  ~Engine();
  Engine(const Engine&) = delete;
  Engine& operator=(const Engine&) = delete;

  /// Plan the chain. A dry run reads no frames (for `wavestack check`).
  const PlanSummary& plan(bool dry_run, const std::string& frames_override = {});
  /// Run a planned pipeline to completion (or throw; no file is then left at
  /// the output path).
  RunReport run(const RunSettings& settings);

private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

/// Map any exception to the exit status of DESIGN.md and print it.
int report_error(const std::exception& e);

} // namespace wavestack::pipeline
