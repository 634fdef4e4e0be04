#pragma once
// StackWriter: writes a raw frame stack (N,H,W) or a single frame (H,W) in
// a chosen element type, frame by frame, for the demo generator and tests.
// Writes straight to `path` (no temporary name: these are inputs, not
// results). Chunk = one frame; optional deflate. Values are converted by
// HDF5; float -> integer conversion truncates toward zero and clamps at the
// type's limits, so round first.
#include "wavestack/core/image.hpp"
#include "wavestack/io/frame_source.hpp"
#include "wavestack/io/hdf5.hpp"

#include <cstddef>
#include <memory>
#include <string>

namespace wavestack::io {

struct StackOptions {
  bool single_frame = false; ///< write a rank-2 (H,W) dataset; frames must be 1
  bool append = false;       ///< add the dataset to an existing file instead of replacing it
  int deflate_level = 0;     ///< 0 = no compression, 1-9 shuffle + deflate
};

class StackWriter {
public:
  /// Create `dataset` (parent groups as needed) in `path`. Error(output)
  /// naming the path when the file or dataset cannot be created.
  StackWriter(const std::string& path, const std::string& dataset, DType type, std::size_t frames,
              std::size_t height, std::size_t width, StackOptions options = {});
  StackWriter(StackWriter&&) noexcept;
  StackWriter& operator=(StackWriter&&) noexcept;
  ~StackWriter();

  /// Write one frame from memory. T is one of uint8_t, uint16_t, int16_t,
  /// uint32_t, int32_t, float, double.
  template <class T> void write(std::size_t frame, ImageView<const T> data);

  /// Attribute on the dataset, or on the file's root.
  void set_attribute(const std::string& name, const AttributeValue& value);
  void set_file_attribute(const std::string& name, const AttributeValue& value);

  /// Close the file; Error(output) if HDF5 could not finish writing it.
  void close();

private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

} // namespace wavestack::io
