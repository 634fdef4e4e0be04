#pragma once
// FrameSource: reads camera frames one at a time from an HDF5 dataset.
//
// Accepted datasets: rank 2 (H,W), read as one frame, or rank 3 (N,H,W);
// element types uint8, int8, uint16, int16, uint32, int32, uint64, int64,
// float32 and float64 in either byte order (DESIGN.md names u8, u16, i16,
// u32, f32, f64; the other integers cost nothing extra). Frames must be at
// least 16×16 pixels; any larger size is fine (e.g. 1200×1920).
//
// Each read() is ONE hyperslab (1,H,W) converted to float32 by HDF5 itself
// (memory type H5T_NATIVE_FLOAT) straight into the caller's buffer; the
// stack is never loaded whole. Integers above 2^24 lose precision in float32.
// The conversion buffer and the chunk cache are sized at open() so that a
// steady stream of reads allocates nothing on our side, and a chunk spanning
// several frames is decompressed once rather than once per frame.
//
// Thread safety: every member that calls HDF5 takes io::hdf5_mutex(). One
// FrameSource must not be used from two threads at the same time.
#include "wavestack/core/image.hpp"
#include "wavestack/io/hdf5.hpp"

#include <cstddef>
#include <memory>
#include <span>
#include <string>
#include <string_view>
#include <vector>

namespace wavestack::io {

/// Element type of a source dataset.
enum class DType { u8, i8, u16, i16, u32, i32, u64, i64, f32, f64 };

/// numpy name of a DType: "uint8", "int16", "float32", ...
std::string_view dtype_name(DType t);
/// Bytes per element of a DType.
std::size_t dtype_size(DType t);

/// "file.h5:/dataset" split into its two parts.
struct DatasetSpec {
  std::string file;
  std::string dataset; ///< empty when the spec names only a file
};

/// Split "file.h5:/dataset" at the last ':'. A spec without ':' (or one that
/// names an existing file as a whole, so "run:2.h5" still works) is a file
/// alone. A dataset without a leading '/' gets one ("f.h5:holo" -> "/holo").
/// Error(config) for an empty file part (":/x").
DatasetSpec split_dataset_spec(std::string_view spec);

/// Largest frame accepted, in pixels (2^28, e.g. 16384×16384): each frame
/// in flight holds float and complex copies, so a declared size above this
/// (an unwritten chunked dataset, a wrong shape) is refused before allocating.
inline constexpr std::size_t max_frame_pixels = std::size_t{1} << 28;

class FrameSource {
public:
  /// Open `dataset` (e.g. "/holograms") in the HDF5 file at `path`.
  /// Error(input), naming file and dataset, when: the file does not exist, is
  /// not an HDF5 file or cannot be read; the dataset is missing (the message
  /// lists up to 10 datasets that do exist) or is a group; the rank is not 2
  /// or 3; a dimension is zero; frames are smaller than 16×16 or larger than
  /// max_frame_pixels; the element type is not one of the accepted ones (the
  /// message names the found type).
  static FrameSource open(const std::string& path, const std::string& dataset);
  /// Same from the bytes of an HDF5 file held in memory (HDF5's core driver
  /// on a copy of `image`); `name` stands for the file in errors and path().
  /// Used by the fuzz targets and tests, which have no file on disk.
  static FrameSource open_image(std::span<const std::byte> image, const std::string& name,
                                const std::string& dataset);

  FrameSource(FrameSource&&) noexcept;
  FrameSource& operator=(FrameSource&&) noexcept;
  ~FrameSource();

  std::size_t count() const noexcept;   ///< number of frames (1 for rank 2)
  std::size_t height() const noexcept;  ///< rows per frame
  std::size_t width() const noexcept;   ///< columns per frame
  int rank() const noexcept;            ///< 2 or 3
  DType dtype() const noexcept;
  std::string_view dtype_name() const noexcept { return io::dtype_name(dtype()); }
  const std::string& path() const noexcept;
  const std::string& dataset() const noexcept; ///< absolute, e.g. "/holograms"
  /// Chunk shape of the dataset, empty when it is contiguous.
  const std::vector<std::uint64_t>& chunk() const noexcept;

  /// Attributes of the dataset, for `inspect` and for instrument metadata.
  std::vector<Attribute> attributes() const;

  /// Read frame `frame` into `out` (height()×width(), any row stride),
  /// converted to float. Error(input) with the frame index when the index is
  /// out of range, HDF5 fails or a float frame holds NaN or infinite pixels;
  /// Error(internal) when `out` has another shape.
  void read(std::size_t frame, ImageView<float> out);

  /// Size of one frame in its stored element type (h·w·element size).
  std::size_t raw_frame_bytes() const noexcept;
  /// Read frame `frame` in its own element type, native byte order, into
  /// `dst` (raw_frame_bytes() bytes, contiguous): one hyperslab, no type
  /// conversion. The serial reader of the pipeline uses this and converts
  /// with convert_raw() in its parallel stage, which keeps the read thin.
  void read_raw(std::size_t frame, void* dst);
  /// Convert a frame read by read_raw() (element type `type`) to float.
  static void convert_raw(DType type, const void* src, ImageView<float> out);

  /// Check frame `frame` (as converted to float) before it is processed.
  /// Error(input) naming file, dataset and frame when a pixel is NaN or
  /// infinite: an FFT spreads one such pixel over the whole frame. A warning
  /// (log::warn, once per frame, so it lands in the output's warnings) when
  /// every pixel has one value: all zero, the type's maximum or that of a
  /// 10/12/14-bit camera (saturated), or any other constant; such a frame is
  /// still processed. Touches no HDF5: safe from any thread.
  void check_frame(std::size_t frame, ImageView<const float> data) const;

  /// The datasets in a file, for `inspect FILE.h5` (same as io::list_datasets).
  static std::vector<DatasetInfo> list_datasets(const std::string& path, std::size_t limit = 1000) {
    return io::list_datasets(path, limit);
  }

private:
  struct Impl;
  explicit FrameSource(std::unique_ptr<Impl> impl);
  /// The checks and set-up shared by open() and open_image(), on an open file.
  static FrameSource open_dataset(std::unique_ptr<Impl> impl);
  std::unique_ptr<Impl> impl_;
};

} // namespace wavestack::io
