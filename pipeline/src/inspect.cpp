// `wavestack inspect FILE.h5[:/dataset]`: what is in a file, and for a
// hologram dataset where its carrier is.
#include "commands.hpp"
#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/io/frame_source.hpp"
#include "wavestack/io/hdf5.hpp"
#include "wavestack/sideband/carrier.hpp"

#include <cstdio>
#include <filesystem>

namespace wavestack::pipeline {
namespace {

std::string join(const std::vector<std::uint64_t>& v, const char* sep) {
  std::string s;
  for (std::size_t i = 0; i < v.size(); ++i) s += (i ? sep : "") + std::to_string(v[i]);
  return s;
}

void print_attributes(const std::vector<io::Attribute>& attrs, const char* indent) {
  for (const io::Attribute& a : attrs) {
    std::string v = a.value;
    if (v.size() > 200) v = v.substr(0, 197) + "...";
    for (auto& c : v)
      if (c == '\n') c = ' ';
    std::printf("%s@%s = %s  (%s)\n", indent, a.name.c_str(), v.c_str(), a.type.c_str());
  }
}

void print_carrier(const std::string& file, const std::string& dataset) {
  io::FrameSource src = io::FrameSource::open(file, dataset);
  Image<float> frame(src.height(), src.width());
  src.read(0, frame.view());
  // Without an instrument the pitch is one pixel: frequencies in cycles/pixel.
  Grid g;
  g.dy = g.dx = 1.0;
  g.wavelength = 1.0;
  try {
    sideband::Carrier c = sideband::find_carrier(frame.view(), g);
    std::printf("  carrier of frame 0 (+1 order): ky = %.3f, kx = %.3f bins; %.4f, %.4f cycles/pixel; "
                "fringe period %.2f px; strength %.0f\n",
                c.ky, c.kx, c.fy, c.fx, c.period_pixels(g), c.strength);
  } catch (const Error& e) {
    std::printf("  no carrier found in frame 0: %s\n", e.message().c_str());
  }
}

} // namespace

int cmd_inspect(const std::string& target) {
  io::DatasetSpec spec = io::split_dataset_spec(target);
  if (!std::filesystem::exists(spec.file)) fail_input("file does not exist", in_file(spec.file));
  if (!spec.dataset.empty()) {
    io::FrameSource src = io::FrameSource::open(spec.file, spec.dataset);
    std::printf("%s:%s  %zu frames of %zux%zu %s (rank %d)%s\n", spec.file.c_str(), src.dataset().c_str(),
                src.count(), src.height(), src.width(), std::string(src.dtype_name()).c_str(), src.rank(),
                src.chunk().empty() ? "" : (", chunks " + join(src.chunk(), "x")).c_str());
    print_attributes(src.attributes(), "  ");
    print_carrier(spec.file, spec.dataset);
    return 0;
  }
  std::printf("%s\n", spec.file.c_str());
  print_attributes(io::read_attributes(spec.file, "/"), "  ");
  for (const io::DatasetInfo& d : io::list_datasets(spec.file)) {
    std::string filters;
    for (const auto& f : d.filters) filters += (filters.empty() ? ", " : "+") + f;
    std::printf("%s  (%s) %s%s%s\n", d.path.c_str(), join(d.shape, ", ").c_str(), d.type.c_str(),
                d.chunk.empty() ? "" : (", chunks " + join(d.chunk, "x")).c_str(), filters.c_str());
    print_attributes(io::read_attributes(spec.file, d.path), "    ");
  }
  return 0;
}

} // namespace wavestack::pipeline
