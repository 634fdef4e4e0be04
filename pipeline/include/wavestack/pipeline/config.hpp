#pragma once
// Loading a pipeline file (DESIGN.md "Pipeline file", a contract): parse the
// TOML, merge the instrument profile, apply --set overrides, validate every
// table (unknown keys, units, missing instrument values: Error(config) with
// file:line:column) and build the stages from the registry.
#include "wavestack/pipeline/stage.hpp"

#include <toml++/toml.h>

#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <vector>

namespace wavestack::pipeline {

/// A frame selection "start:stop[:step]" (stop optional, Python slice rules
/// without negative indices).
/// Most frames one run takes (its index list, done flags and the output's
/// chunk index are sized by it); larger selections are split into shards
/// with --frames and joined with `wavestack merge`.
inline constexpr std::int64_t max_run_frames = 10'000'000;

struct FrameRange {
  std::int64_t start = 0;
  std::optional<std::int64_t> stop;
  std::int64_t step = 1;
  static FrameRange parse(const std::string& text); ///< throws Error(config)
  /// Indices selected out of `count` frames.
  std::vector<std::int64_t> select(std::int64_t count) const;
  /// How many frames select(count) returns, without making the list.
  std::int64_t size(std::int64_t count) const;
  std::string str() const;
};

struct InputSpec {
  std::string path;       ///< resolved against the pipeline file's folder
  std::string dataset = "/holograms";
  FrameRange frames;
  std::string background_path;    ///< empty when none
  std::string background_dataset; ///< dataset of the background hologram
};

struct OutputSpec {
  std::string path;
  std::vector<std::string> products = {"field", "amplitude", "phase", "opd"};
  std::string compression = "none"; ///< "none" or "deflate"
  int level = 4;                    ///< deflate level 1..9
  int preview_every = 0;            ///< 0 = first frame only, k = every k-th, -1 = none
  /// Height product: "none", "transmission" (h = OPD/index_difference) or
  /// "reflection" (h = OPD/2).
  std::string height = "none";
  double index_difference = 0;
};

struct RunOptions {
  int threads = 0; ///< 0 = all cores
  int tokens = 0;  ///< frames in flight; 0 = 2 × threads
  /// FFTW planner effort: "measure" (default: fastest execution; plans are
  /// kept in the wisdom file so later runs reuse exactly the same ones) or
  /// "estimate" (no timing; a plan is a pure function of the sizes).
  /// The environment variable WAVESTACK_FFT_PLANNING overrides the default.
  std::string fft_planning = "measure";
  /// Wisdom file: "auto" ($XDG_CACHE_HOME or ~/.cache, /wavestack/), "none",
  /// or a path (relative to the pipeline file).
  std::string fft_wisdom = "auto";
};

struct Pipeline {
  std::string file;         ///< the pipeline file as given
  std::string profile_file; ///< the instrument profile used, or empty
  InputSpec input;
  Instrument instrument;
  std::vector<std::unique_ptr<Stage>> stages;
  std::vector<std::string> stage_types;
  OutputSpec output;
  RunOptions run;
  toml::table table;        ///< the merged, overridden table that was run
  std::string text() const; ///< `table` printed back as normalised TOML
};

/// A `--set KEY=VALUE` override; KEY is dotted ("output.path",
/// "stage.3.distance", 1-based stage numbers).
struct Override {
  std::string key;
  std::string value;
  static Override parse(const std::string& text); ///< "KEY=VALUE", throws Error(config)
};

Pipeline load_pipeline(const std::string& path, const std::vector<Override>& overrides = {});
/// Same from text (for tests); `file` names it in errors, `folder` resolves paths.
Pipeline load_pipeline_text(const std::string& text, const std::string& file, const std::string& folder,
                            const std::vector<Override>& overrides = {});

} // namespace wavestack::pipeline
