#pragma once
// Joining the outputs of a run split with --frames into shards (e.g. the
// tasks of a cluster array job) into one output file.
//
// Every per-frame dataset of the merged file (those listed in the shards'
// `frame_datasets` attribute: images, /frames/*, /focus/distance, per-frame
// records) is an HDF5 virtual dataset over the shards' datasets: no frame is
// copied, and h5py, MATLAB or Fiji read it as one (N, h, w) array as long
// as the shards stay beside it (source files are stored relative to the
// merged file's folder when they are inside it). Result tables (compound
// datasets) are concatenated in frame order; datasets known once per run
// (e.g. /focus/distances) are copied after checking every shard has the
// same values.
//
// Checks, each an Error(input) naming the shard: every shard is a finished
// wavestack output (not a .partial file, every frame done) of the same
// pipeline text and the same input data (source_fingerprint), with the
// same datasets, types and frame shapes; ordered by first frame, shards
// neither overlap nor leave a gap in the frame sequence (one common step).
// The merged file is written under "<out>.partial" and renamed when complete.
#include <cstdint>
#include <string>
#include <vector>

namespace wavestack::io {

struct MergeReport {
  std::size_t frames = 0;                 ///< frames of the merged file
  std::vector<std::string> shards;        ///< in frame order
  std::vector<std::string> virtual_sets;  ///< datasets mapped onto the shards
  std::vector<std::string> copied_sets;   ///< tables and constants
  std::int64_t first = 0, last = 0, step = 1; ///< source frames covered
};

MergeReport merge_shards(const std::vector<std::string>& shards, const std::string& output);

} // namespace wavestack::io
