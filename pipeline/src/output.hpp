#pragma once
// The output side of a run: which products exist, computing them from the
// final field of a frame (parallel stage), compressing them there when
// deflate is on, writing them (serial stage), and the PNG previews.
#include "journal.hpp"
#include "wavestack/io/frame_sink.hpp"
#include "wavestack/pipeline/config.hpp"
#include "wavestack/pipeline/engine.hpp"

#include <chrono>
#include <mutex>
#include <optional>
#include <string>
#include <vector>

namespace wavestack::pipeline {

/// Per-token product buffers, sized once.
struct Products {
  Image<float> amplitude, phase, opd, height;
  std::vector<unsigned char> packed[5]; ///< compressed field, amplitude, phase, opd, height
  std::vector<std::string> previews;    ///< PNGs written for this frame
};

class OutputFile {
public:
  /// Create the output's partial file, or with `resume` continue the one an
  /// interrupted run of the same pipeline, input and frames left (refusing
  /// with Error(config/input) when they differ; starting over when there is
  /// none or it was killed before its structure reached the disk).
  OutputFile(const Pipeline& pl, const PlanSummary& plan, bool resume = false);
  ~OutputFile();

  /// The first output frame still to write (0 unless resumed).
  std::size_t resume_from() const { return start_; }

  void size_products(Products& p) const;
  /// Parallel stage: amplitude, phase and OPD from the frame's final state;
  /// compression when on; previews of the frames that get one.
  void compute(const FrameState& f, Products& p) const;
  /// Serial stage: write every product of the frame, then mark it done.
  void write(const FrameState& f, Products& p);
  void finish();
  /// PNGs written so far.
  std::vector<std::string> previews() const;
  /// CSV files written by finish().
  const std::vector<std::string>& csv_files() const { return csv_written_; }
  /// Whether output frame `output_index` gets PNG previews.
  bool wants_preview(std::size_t output_index) const;

private:
  io::FrameSink::Product existing(const std::string& name) const;
  void render_previews(const FrameState& f, Products& p) const;

  const Pipeline& pl_;
  const PlanSummary& plan_;
  bool resumed_ = false;
  io::FrameSink sink_;
  std::size_t start_ = 0;
  std::optional<RunJournal> journal_;
  std::vector<std::string> resumed_warnings_;
  std::size_t journaled_warnings_ = 0;
  std::chrono::steady_clock::time_point last_checkpoint_;
  std::vector<io::FrameSink::Product> h_records_;
  std::vector<std::size_t> table_values_; ///< values (rows × columns) of each table so far, in the journal
  std::vector<double> row_scratch_;       ///< one frame's rows of a table, reused
  std::vector<std::string> csv_written_;
  bool field_ = false, amplitude_ = false, phase_ = false, opd_ = false, height_ = false;
  io::FrameSink::Product h_field_ = 0, h_amplitude_ = 0, h_phase_ = 0, h_opd_ = 0, h_height_ = 0;
  float height_per_nm_ = 1; ///< height (nm) per nm of OPD
  bool compress_ = false;
  std::string preview_dir_;
  mutable std::mutex preview_mutex_;
  mutable std::vector<std::string> previews_;
  bool finished_ = false;
};

/// The folder that receives the PNG previews of an output file:
/// "out/reconstruction.h5" -> "out/reconstruction_previews".
std::string preview_folder(const std::string& output_path);
/// The CSV file of a table: "out/rec.h5", "focus/objects" -> "out/rec_focus_objects.csv".
std::string table_csv_path(const std::string& output_path, const std::string& table);

} // namespace wavestack::pipeline
