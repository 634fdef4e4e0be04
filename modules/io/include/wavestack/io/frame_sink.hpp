#pragma once
// FrameSink: writes the wavestack output file (DESIGN.md "Output file",
// format_version 1) one frame at a time.
//
// Atomic result: the file is created under the TEMPORARY name
// "<final>.partial" (partial_path()) and renamed to the final path only by
// finish(). A sink destroyed without finish() (an error path) closes the
// partial file cleanly and leaves it for --resume; nothing is created at the
// final path (a file already there from an earlier run is left untouched).
//
// Layout written (contract):
//   /                 format="wavestack", format_version=1, software_version,
//                     created (ISO 8601 UTC), pipeline, source_file,
//                     source_dataset, plus any set_attribute("/", ...)
//   <image products>  (N,h,w) float32 or compound {r: f32, i: f32}
//                     (h5py reads complex64), chunk (1,h,w); attributes
//                     units, pixel_pitch [dy, dx] (m), wavelength (m),
//                     medium_index, plane (m, optional), plus extras
//   /frames/index     (N) int64, fill -1   source frame index
//   /frames/done      (N) uint8, fill 0    1 once the frame is complete
//   /focus/distance   (N) float64, fill NaN, units "m"
//   root attribute frame_datasets: the paths of the datasets with one entry
//   per output frame (images, /frames/*, /focus/distance, per-frame
//   records; written at the first checkpoint()), which `merge` joins
// A finished file has every frame written. In a partial file only the
// frames with /frames/done == 1 are defined.
//
// Killed runs (SIGKILL, a cluster's time limit): the file structure is
// flushed once the datasets are declared (checkpoint()). Uncompressed image
// storage is placed at creation, so a frame is a write at a fixed offset and
// its done flag can follow at once; compressed chunks are placed as they
// come, so their done flags are set only at the next checkpoint(), after
// their index is in the file. open_for_resume() checks the chunks of every
// frame marked done before trusting it.
//
// Compression: none (default) or shuffle + deflate level 1-9. With deflate,
// write_frame() lets HDF5 compress inside the (serial) writer, which is
// correct but slow; the fast path compresses in the caller's parallel stage
// with compress_frame() / compress_chunk() (thread-safe, no HDF5, no lock)
// and hands the bytes to write_frame_compressed(), a direct chunk write.
//
// Usage: create(), add_image()/add_vector() for every product (before any
// frame is written and before other threads use the sink), then per frame i
// in order: write every product of frame i, set_focus_distance(i, z),
// mark_done(i, source_index). Finally finish().
//
// Thread safety: members that call HDF5 take io::hdf5_mutex(). Writing
// members must be called from one thread at a time (the serial writer);
// compress_frame() may run concurrently on any number of threads.
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/io/hdf5.hpp"

#include <cstddef>
#include <cstdint>
#include <memory>
#include <string>
#include <vector>

namespace wavestack::io {

enum class Compression { none, deflate };

struct CompressionOptions {
  Compression method = Compression::none;
  int level = 4; ///< deflate level 1 (fastest) .. 9 (smallest); ignored for none
};

/// Element type of an image product.
enum class ImageType {
  f32,      ///< float32
  complex64 ///< compound {r: float32, i: float32}, memory layout of std::complex<float>
};

/// Element type of a 1-D or 2-D table product.
enum class ValueType { u8, i64, f32, f64 };

/// Root attributes fixed at creation.
struct SinkInfo {
  std::string software_version; ///< empty: this build's version
  std::string pipeline;         ///< the full pipeline TOML text as run
  std::string source_file;
  std::string source_dataset;
};

/// Shuffle (element size `elem_size` bytes) then zlib-deflate `bytes` bytes
/// at `data`, exactly as HDF5's shuffle and deflate filters do, into `out`
/// (resized to the compressed size; its capacity is reused across calls, so
/// a warm vector does not allocate). Uses a per-thread scratch buffer; safe
/// to call from many threads at once. Error(internal) for a bad level.
void compress_chunk(const void* data, std::size_t bytes, std::size_t elem_size, int level,
                    std::vector<unsigned char>& out);

class FrameSink {
public:
  using Product = std::size_t; ///< handle returned by add_image/add_vector/add_matrix

  /// "<final_path>.partial".
  static std::string partial_path(const std::string& final_path);

  /// Create `<final_path>.partial` (truncating an old one) for `frames`
  /// output frames, with the root attributes and /frames/index,
  /// /frames/done, /focus/distance. Error(output) naming the path when the
  /// folder does not exist, is not writable, the final path is a folder, or
  /// HDF5 cannot create the file. Error(internal) when frames == 0 or the
  /// deflate level is outside 1-9.
  static FrameSink create(const std::string& final_path, std::size_t frames, const SinkInfo& info,
                          CompressionOptions compression = {});

  /// Reopen the partial file left by an interrupted run (give the final
  /// path or the ".partial" path itself), re-register every dataset in it as
  /// a product (by name), read the compression settings and /frames/done;
  /// done_prefix() then tells where to continue. finish() renames as usual.
  /// Error(output) when the partial file is missing, unreadable or not a
  /// wavestack format_version 1 file.
  static FrameSink open_for_resume(const std::string& path);

  /// The `pipeline` root attribute (the TOML text a file was made with) of
  /// a finished or partial output file, e.g. to check that --resume runs the
  /// same pipeline. Error(input) when it is missing.
  static std::string read_pipeline_text(const std::string& path);

  FrameSink(FrameSink&&) noexcept;
  FrameSink& operator=(FrameSink&&) noexcept;
  /// Without finish(): closes the partial file and leaves it for --resume.
  ~FrameSink();

  /// Declare an image product `name` (e.g. "phase", "/opd"): dataset
  /// (N,height,width), chunk (1,height,width), attributes units,
  /// pixel_pitch [grid.dy, grid.dx], wavelength, medium_index, plane (only
  /// when `record_plane`), then `extra` (e.g. {"wrapped", int64_t{1}}).
  Product add_image(const std::string& name, ImageType type, std::size_t height, std::size_t width,
                    const std::string& units, const Grid& grid, bool record_plane,
                    const Attributes& extra = {});

  /// Declare a z-stack image product: dataset (N,planes,height,width),
  /// chunk (1,planes,height,width), same attributes as add_image. A frame is
  /// written from a (planes·height)×width image holding the planes one
  /// below the other.
  Product add_stack(const std::string& name, ImageType type, std::size_t planes, std::size_t height,
                    std::size_t width, const std::string& units, const Grid& grid, bool record_plane,
                    const Attributes& extra = {});

  /// A table written once (e.g. per-object results collected over the run):
  /// a compound dataset of `rows` records with one float64 or int64 field
  /// per column, plus a `units` attribute listing the units of every column
  /// (comma-separated, in column order). h5py reads it as a structured array.
  struct TableColumn {
    std::string name;
    bool integer = false; ///< int64 instead of float64
    std::string units;
  };
  void write_table(const std::string& name, const std::vector<TableColumn>& columns,
                   const std::vector<double>& values /* rows × columns, row-major */);
  /// The same in pieces, for tables too long to hold in memory: declare the
  /// table with its row count, then write rows in batches.
  using Table = std::size_t;
  Table begin_table(const std::string& name, const std::vector<TableColumn>& columns, std::size_t rows);
  void write_table_rows(Table table, std::size_t first_row, const double* values /* rows × columns */,
                        std::size_t rows);

  /// Declare a 1-D dataset (length) or 2-D dataset (rows, cols) with a units
  /// attribute; parent groups are created as needed. Unwritten values are
  /// NaN for float types and 0 for integer types.
  Product add_vector(const std::string& name, ValueType type, std::size_t length,
                     const std::string& units, const Attributes& extra = {});
  Product add_matrix(const std::string& name, ValueType type, std::size_t rows, std::size_t cols,
                     const std::string& units, const Attributes& extra = {});
  /// A float64 vector known once for the whole run (e.g. the planes of a
  /// focus sweep), written at once. Unlike add_vector() with a length equal
  /// to the frame count, it is not a per-frame dataset.
  Product add_constant(const std::string& name, const std::vector<double>& values, const std::string& units);

  /// Handle of an existing product by name ("phase" or "/phase"); for the
  /// built-in tables use "frames/index", "frames/done", "focus/distance".
  /// Error(internal) when there is none.
  Product product(const std::string& name) const;
  bool has_product(const std::string& name) const;
  std::vector<std::string> product_names() const;

  /// A text attribute of the root of the open file ("" when there is none).
  std::string root_text_attribute(const std::string& name) const;

  /// Add or replace an attribute on the root ("/") or on a product by name,
  /// any time before finish() (e.g. warnings collected during the run).
  void set_attribute(const std::string& object, const std::string& name, const AttributeValue& value);

  /// Write frame `frame` of an image product from memory (any row stride):
  /// one hyperslab, H5Dwrite. With deflate on, HDF5 compresses here.
  void write_frame(Product p, std::size_t frame, ImageView<const float> data);
  void write_frame(Product p, std::size_t frame, ImageView<const cfloat> data);

  /// Compress one frame of product `p` for write_frame_compressed(), with the
  /// sink's shuffle+deflate settings. No HDF5, no lock: call it from the
  /// parallel stage. Error(internal) if compression is off or types differ.
  void compress_frame(Product p, ImageView<const float> data, std::vector<unsigned char>& out) const;
  void compress_frame(Product p, ImageView<const cfloat> data, std::vector<unsigned char>& out) const;

  /// Write precompressed bytes of one whole frame (one chunk) directly
  /// (H5Dwrite_chunk), bypassing HDF5's filter pipeline.
  void write_frame_compressed(Product p, std::size_t frame, const unsigned char* bytes, std::size_t size);

  /// Tables: one value, one row of a matrix, or the whole table at once.
  void write_value(Product p, std::size_t index, double value);
  void write_value(Product p, std::size_t index, std::int64_t value);
  void write_value(Product p, std::size_t index, int value) { write_value(p, index, std::int64_t{value}); }
  void write_row(Product p, std::size_t row, const double* values, std::size_t count);
  void write_all(Product p, const double* values, std::size_t count);

  /// /focus/distance[frame] = metres.
  void set_focus_distance(std::size_t frame, double metres);
  /// /frames/index[frame] = source_index, then /frames/done[frame] = 1. Call
  /// after every product of the frame has been written.
  void mark_done(std::size_t frame, std::int64_t source_index);

  /// Number of leading frames with /frames/done == 1 (as read by open_for_resume(),
  /// then kept up to date by mark_done()).
  std::size_t done_prefix() const noexcept;
  /// Read the whole /frames/done back from the file.
  std::vector<std::uint8_t> read_done() const;

  /// Make what is written so far survive a kill: flush HDF5's metadata, then
  /// set the done flags of compressed frames written since the last
  /// checkpoint, then flush again. Call after the datasets are declared and
  /// every second or so. (Uncompressed frames are marked done at once: their
  /// storage is placed when the file is created.)
  void checkpoint();

  /// Close the file and rename it to the final path. Error(output) when
  /// closing or renaming fails (the data then stays in the .partial file).
  void finish();
  bool finished() const noexcept;

  std::size_t frames() const noexcept;
  const std::string& final_path() const noexcept;
  const std::string& partial_file() const noexcept; ///< the .partial path being written
  CompressionOptions compression() const noexcept;

private:
  struct Impl;
  explicit FrameSink(std::unique_ptr<Impl> impl);
  std::unique_ptr<Impl> impl_;
};

} // namespace wavestack::io
