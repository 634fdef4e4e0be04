// Fuzz target: the HDF5 frame source (modules/io FrameSource) on an
// in-memory file image: open /holograms and read frames (and, with
// WAVESTACK_FUZZ_ATTRIBUTES=1, its attributes).
//
// Expected outcome for a bad file: a wavestack::Error of kind input. A
// finding: a crash or sanitizer report in our code or in libhdf5 (which is
// not instrumented: ASan sees its heap use, not its reads of its own
// buffers), an Error of another kind, or any other exception.
#include "wavestack/core/error.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/io/frame_source.hpp"

#include <hdf5.h>

#include <algorithm>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <span>
#include <string>
#include <vector>

using namespace wavestack;

namespace {

[[noreturn]] void finding(const char* what, const std::string& detail) {
  std::fprintf(stderr, "fuzz_frame_source: %s: %s\n", what, detail.c_str());
  std::abort();
}

// The fuzzer itself reads only frames and chunks up to this size: a small file may
// legitimately describe a huge chunked dataset (HDF5 returns the fill value
// for chunks never written), and reading those costs time, not coverage.
constexpr std::size_t max_fuzz_frame_bytes = std::size_t{16} << 20;

// Listing attributes (H5Aiterate2, only `wavestack inspect` does it) of a
// damaged file crashes libhdf5 1.10.8 within seconds, again and again in
// the same few places (fuzz/README.md "Findings"): off unless
// WAVESTACK_FUZZ_ATTRIBUTES=1, so the fuzzer spends its time on the path
// `run` takes.
bool g_attributes = false;

} // namespace

extern "C" int LLVMFuzzerInitialize(int*, char***) {
  log::set_level(log::Level::quiet);
  const char* attributes = std::getenv("WAVESTACK_FUZZ_ATTRIBUTES");
  g_attributes = attributes && std::string(attributes) == "1";
  // Let HDF5 keep more freed blocks for reuse (16 MiB per list instead of
  // its 64 KiB-1 MiB): each open allocates a large metadata cache, and fresh
  // pages for it took most of the run time (3x fewer executions per second).
  // Bounded, so a huge block a damaged file asked for is given back rather
  // than kept, and scanned by every leak check.
  constexpr int list = 16 << 20, global = 64 << 20;
  H5set_free_list_limits(global, list, global, list, global, list);
  return 0;
}

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  try {
    io::FrameSource src = io::FrameSource::open_image(std::as_bytes(std::span(data, size)), "fuzz.h5", "/holograms");
    if (g_attributes) (void)src.attributes();
    if (src.width() > max_fuzz_frame_bytes / sizeof(double) / src.height()) return 0;
    // HDF5 reads (and fills) a whole chunk for any part of it: the same
    // limit for a chunk (the reader itself accepts up to 1 GiB).
    std::size_t chunk_bytes = io::dtype_size(src.dtype());
    for (std::uint64_t d : src.chunk())
      chunk_bytes = chunk_bytes > max_fuzz_frame_bytes / d ? max_fuzz_frame_bytes + 1 : chunk_bytes * d;
    if (chunk_bytes > max_fuzz_frame_bytes) return 0;
    Image<float> frame(src.height(), src.width());
    std::vector<unsigned char> raw(src.raw_frame_bytes());
    // The first frames and the last: the hyperslab arithmetic at both ends.
    const std::size_t n = src.count();
    for (std::size_t i = 0; i < n; i = i < 2 ? i + 1 : std::max(i + 1, n - 1)) {
      src.read(i, frame.view());
      src.read_raw(i, raw.data());
      io::FrameSource::convert_raw(src.dtype(), raw.data(), frame.view());
    }
  } catch (const Error& e) {
    if (e.kind() != ErrorKind::input) finding("error of a kind other than input", e.what());
  } catch (const std::exception& e) {
    finding("exception other than wavestack::Error", e.what());
  }
  log::clear_warnings();
  return 0;
}
