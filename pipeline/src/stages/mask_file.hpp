#pragma once
// A pixel mask named in a stage's table as mask = "file.h5:/dataset"
// (relative to the pipeline file; non-zero = use the pixel), read once at
// plan time and checked against the size of the maps it applies to.
#include "wavestack/core/error.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/io/frame_source.hpp"
#include "wavestack/pipeline/params.hpp"

#include <cstdint>
#include <filesystem>
#include <string>

namespace wavestack::pipeline::stages {

struct MaskFile {
  std::string file, dataset;
  bool given() const { return !file.empty(); }

  /// Read the `mask` key of `p` (nothing when absent).
  static MaskFile from(Params& p) {
    MaskFile m;
    if (auto s = p.string("mask")) {
      const io::DatasetSpec spec = io::split_dataset_spec(*s);
      std::filesystem::path f = spec.file;
      if (f.is_relative()) f = std::filesystem::path(p.file()).parent_path() / f;
      m.file = f.lexically_normal().string();
      m.dataset = spec.dataset.empty() ? "/mask" : spec.dataset;
    }
    return m;
  }

  /// The mask as 0/1, h×w; Error(input) naming the file for another size.
  Image<std::uint8_t> load(std::size_t h, std::size_t w, const char* what) const {
    io::FrameSource src = io::FrameSource::open(file, dataset);
    if (src.height() != h || src.width() != w) {
      ErrorContext c = in_file(file);
      c.dataset = dataset;
      fail_input(std::string("the ") + what + " mask is " + std::to_string(src.height()) + "x" +
                     std::to_string(src.width()) + " but the maps are " + std::to_string(h) + "x" + std::to_string(w) +
                     " (the size after the sideband crop)",
                 c);
    }
    Image<float> m(h, w);
    src.read(0, m.view());
    Image<std::uint8_t> out(h, w);
    for (std::size_t i = 0; i < m.size(); ++i) out.data()[i] = m.data()[i] != 0 ? 1 : 0;
    return out;
  }
};

} // namespace wavestack::pipeline::stages
