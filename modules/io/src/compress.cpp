// Shuffle + deflate of one chunk, byte-compatible with HDF5's filters so that
// chunks compressed here in parallel can be written with H5Dwrite_chunk and
// decoded by any HDF5 reader (h5py, MATLAB, Fiji).
//
// HDF5 shuffle filter (H5Zshuffle.c): for an element of `s` bytes and `n`
// whole elements, output byte j*n + i is input byte i*s + j; bytes past the
// last whole element are copied unchanged at the end.
// HDF5 deflate filter (H5Zdeflate.c): zlib compress2() at the given level,
// i.e. a zlib stream (RFC 1950) with header and Adler-32 trailer.
#include "wavestack/io/frame_sink.hpp"

#include "wavestack/core/error.hpp"

#include <zlib.h>

#include <cstring>

namespace wavestack::io {

void compress_chunk(const void* data, std::size_t bytes, std::size_t elem_size, int level,
                    std::vector<unsigned char>& out) {
  if (level < 1 || level > 9) fail_internal("deflate level must be 1-9, got " + std::to_string(level));
  if (elem_size == 0) fail_internal("compress_chunk: element size 0");
  const auto* in = static_cast<const unsigned char*>(data);

  // Per-thread scratch for the shuffled bytes: grows to the largest chunk
  // once, then is reused.
  thread_local std::vector<unsigned char> shuffled;
  const unsigned char* src = in;
  if (elem_size > 1 && bytes >= 2 * elem_size) {
    if (shuffled.size() < bytes) shuffled.resize(bytes);
    const std::size_t n = bytes / elem_size;
    unsigned char* dst = shuffled.data();
    for (std::size_t j = 0; j < elem_size; ++j) {
      const unsigned char* s = in + j;
      unsigned char* d = dst + j * n;
      for (std::size_t i = 0; i < n; ++i) d[i] = s[i * elem_size];
    }
    const std::size_t tail = bytes - n * elem_size;
    if (tail) std::memcpy(dst + n * elem_size, in + n * elem_size, tail);
    src = dst;
  }

  uLongf size = compressBound(static_cast<uLong>(bytes));
  if (out.size() < size) out.resize(size);
  const int r = compress2(out.data(), &size, src, static_cast<uLong>(bytes), level);
  if (r != Z_OK) fail_internal("zlib compress2 failed with status " + std::to_string(r));
  out.resize(size); // shrinking keeps the capacity for the next frame
}

} // namespace wavestack::io
