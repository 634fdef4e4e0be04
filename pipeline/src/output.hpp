#pragma once
// The output side of a run: which products exist, computing them from the
// final field of a frame (parallel stage), compressing them there when
// deflate is on, writing them (serial stage), and the PNG previews.
#include "wavestack/io/frame_sink.hpp"
#include "wavestack/pipeline/config.hpp"
#include "wavestack/pipeline/engine.hpp"

#include <mutex>
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
  OutputFile(const Pipeline& pl, const PlanSummary& plan);
  ~OutputFile();

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

private:
  bool wants_preview(std::size_t output_index) const;
  void render_previews(const FrameState& f, Products& p) const;

  const Pipeline& pl_;
  const PlanSummary& plan_;
  io::FrameSink sink_;
  std::vector<io::FrameSink::Product> h_records_;
  std::vector<std::vector<double>> table_values_; ///< collected rows per table (frame column first)
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
