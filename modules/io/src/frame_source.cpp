#include "wavestack/io/frame_source.hpp"

#include "hdf5_util.hpp"
#include "wavestack/core/log.hpp"

#include <sys/stat.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <limits>
#include <filesystem>

namespace wavestack::io {

using namespace detail;

std::string_view dtype_name(DType t) {
  switch (t) {
  case DType::u8: return "uint8";
  case DType::i8: return "int8";
  case DType::u16: return "uint16";
  case DType::i16: return "int16";
  case DType::u32: return "uint32";
  case DType::i32: return "int32";
  case DType::u64: return "uint64";
  case DType::i64: return "int64";
  case DType::f32: return "float32";
  case DType::f64: return "float64";
  }
  return "unknown";
}

DatasetSpec split_dataset_spec(std::string_view spec) {
  const std::string whole(spec);
  std::error_code ec;
  if (!whole.empty() && std::filesystem::exists(whole, ec)) return {whole, {}};
  const std::size_t colon = spec.rfind(':');
  if (colon == std::string_view::npos) return {whole, {}};
  std::string file(spec.substr(0, colon));
  std::string dataset(spec.substr(colon + 1));
  if (file.empty())
    fail_config("'" + whole + "' names no file before ':'; expected the form \"file.h5:/dataset\"");
  if (!dataset.empty()) dataset = absolute_path(dataset);
  return {std::move(file), std::move(dataset)};
}

struct FrameSource::Impl {
  std::string path, dataset;
  Hid file, dset, file_space, mem_space, xfer;
  Hid raw_space; ///< contiguous (h, w) memory space of read_raw()
  std::size_t mem_stride = 0; ///< row stride mem_space was made for
  std::size_t n = 0, h = 0, w = 0;
  int rank = 0;
  DType type = DType::f32;
  std::vector<std::uint64_t> chunk;
  std::vector<unsigned char> conversion; ///< HDF5 type-conversion buffer, one frame

  ErrorContext ctx() const { return where(path, dataset); }
};

FrameSource::FrameSource(std::unique_ptr<Impl> impl) : impl_(std::move(impl)) {}
FrameSource::FrameSource(FrameSource&&) noexcept = default;
FrameSource& FrameSource::operator=(FrameSource&& o) noexcept {
  if (this != &o) {
    Lock lock; // the old Impl closes HDF5 identifiers
    impl_ = std::move(o.impl_);
  }
  return *this;
}
FrameSource::~FrameSource() {
  if (impl_) {
    Lock lock;
    impl_.reset();
  }
}

namespace {

std::string shape_text(const std::vector<std::uint64_t>& s) {
  std::string t;
  for (std::size_t i = 0; i < s.size(); ++i) {
    if (i) t += 'x';
    t += std::to_string(s[i]);
  }
  return t;
}

std::string dataset_list(hid_t file) {
  constexpr std::size_t shown = 10;
  const auto all = detail::list_datasets(file, shown + 1);
  if (all.empty()) return "the file contains no datasets";
  std::string s = "datasets in the file: ";
  for (std::size_t i = 0; i < all.size() && i < shown; ++i) {
    if (i) s += ", ";
    s += all[i].path + " (" + shape_text(all[i].shape) + " " + all[i].type + ")";
  }
  if (all.size() > shown) s += ", ...";
  return s;
}

/// Map an HDF5 type to an accepted DType, or explain why not.
bool classify(hid_t type, DType& out) {
  const H5T_class_t cls = H5Tget_class(type);
  const std::size_t size = H5Tget_size(type);
  if (cls == H5T_INTEGER) {
    const bool sign = H5Tget_sign(type) == H5T_SGN_2;
    switch (size) {
    case 1: out = sign ? DType::i8 : DType::u8; return true;
    case 2: out = sign ? DType::i16 : DType::u16; return true;
    case 4: out = sign ? DType::i32 : DType::u32; return true;
    case 8: out = sign ? DType::i64 : DType::u64; return true;
    default: return false;
    }
  }
  if (cls == H5T_FLOAT) {
    // Only IEEE single/double: other float layouts (e.g. h5py's float16)
    // would need HDF5's slow soft conversion and are not camera formats.
    if (size == 4 && H5Tget_precision(type) == 32) { out = DType::f32; return true; }
    if (size == 8 && H5Tget_precision(type) == 64) { out = DType::f64; return true; }
  }
  return false;
}

/// Size the chunk cache so that a chunk holding several frames is read and
/// decompressed once, not once per frame (HDF5's default cache is 1 MiB).
void tune_chunk_cache(hid_t dapl, hid_t dcpl, std::size_t elem_size, std::size_t h, std::size_t w,
                      const std::string& path, const std::string& dataset, std::vector<std::uint64_t>& chunk_out) {
  if (H5Pget_layout(dcpl) != H5D_CHUNKED) return;
  const int rank = H5Pget_chunk(dcpl, 0, nullptr);
  if (rank <= 0) return;
  std::vector<hsize_t> c(static_cast<std::size_t>(rank));
  H5Pget_chunk(dcpl, rank, c.data());
  chunk_out.assign(c.begin(), c.end());
  // HDF5 allocates a whole chunk to read any part of it: a chunk shape no
  // writer makes (a damaged file) is refused, not allocated.
  constexpr std::size_t max_chunk_bytes = std::size_t{1} << 30;
  std::size_t chunk_bytes = elem_size;
  for (hsize_t d : c) {
    if (rank < 2 || d == 0 || d > max_chunk_bytes / chunk_bytes)
      fail_input("the dataset's chunks (" + shape_text(chunk_out) + ") are empty or larger than 1 GiB; " +
                     "is the file damaged?",
                 where(path, dataset));
    chunk_bytes *= static_cast<std::size_t>(d);
  }
  const std::size_t ch = static_cast<std::size_t>(c[rank - 2]), cw = static_cast<std::size_t>(c[rank - 1]);
  const std::size_t per_frame = ((h + ch - 1) / ch) * ((w + cw - 1) / cw); // chunks touched by one frame
  // One frame per chunk: nothing is read twice, so no cache at all; HDF5
  // then copies an unfiltered chunk straight into the caller's buffer
  // instead of through the cache (one 8 MB copy less per 2048x2048 frame).
  if (rank == 3 && c[0] == 1) {
    H5Pset_chunk_cache(dapl, H5D_CHUNK_CACHE_NSLOTS_DEFAULT, 0, 1.0);
    return;
  }
  const std::size_t wanted = per_frame * chunk_bytes + chunk_bytes / 8;
  constexpr std::size_t default_cache = 1u << 20;
  constexpr std::size_t max_cache = std::size_t{1} << 30;
  if (wanted <= default_cache) return;
  if (wanted > max_cache) {
    log::warn(path + ": the chunks of " + dataset + " hold " + std::to_string(chunk_bytes >> 20) +
                  " MiB each; reading it frame by frame will decompress each chunk more than once",
              "chunk-cache:" + path + dataset);
    return;
  }
  // A prime number of hash slots well above the number of cached chunks.
  const std::size_t slots = std::max<std::size_t>(521, per_frame * 100 + 1);
  H5Pset_chunk_cache(dapl, slots, wanted, 1.0);
}

/// Error(input) when a float frame holds NaN or infinite pixels: an FFT
/// spreads a single one over the whole frame, so no result would be right.
void refuse_non_finite(DType type, ImageView<const float> img, const ErrorContext& ctx) {
  std::size_t nan = 0, inf = 0, first_y = 0, first_x = 0;
  for (std::size_t y = 0; y < img.height(); ++y) {
    const float* r = img.row(y);
    std::size_t bad = 0;
    for (std::size_t x = 0; x < img.width(); ++x) bad += !std::isfinite(r[x]);
    if (!bad) continue;
    for (std::size_t x = 0; x < img.width(); ++x) {
      if (std::isfinite(r[x])) continue;
      if (nan + inf == 0) { first_y = y; first_x = x; }
      ++(std::isnan(r[x]) ? nan : inf);
    }
  }
  if (nan + inf == 0) return;
  std::string what;
  if (nan) what.append(std::to_string(nan)).append(" NaN");
  if (nan && inf) what.append(" and ");
  if (inf)
    what.append(std::to_string(inf))
        .append(type == DType::f64 ? " infinite (or beyond the float32 range)" : " infinite");
  fail_input("the frame has " + what + (nan + inf == 1 ? " pixel" : " pixels") + ", the first at row " +
                 std::to_string(first_y) + ", column " + std::to_string(first_x) +
                 "; the FFTs would spread them over the whole frame, so it is not processed (leave it out of the "
                 "frame selection or repair it)",
             ctx);
}

} // namespace

FrameSource FrameSource::open(const std::string& path, const std::string& dataset_in) {
  Lock lock;
  auto impl = std::make_unique<Impl>();
  impl->path = path;
  impl->dataset = dataset_in.empty() ? std::string() : absolute_path(dataset_in);
  const ErrorContext ctx = impl->ctx();

  struct stat st {};
  if (::stat(path.c_str(), &st) != 0) fail_input("cannot open the input file: it does not exist", ctx);
  if (S_ISDIR(st.st_mode)) fail_input("cannot open the input file: it is a folder, not an HDF5 file", ctx);
  const htri_t is = H5Fis_hdf5(path.c_str());
  if (is <= 0) {
    take_hdf5_message();
    fail_input(is == 0 ? "this is not an HDF5 file" : "the file cannot be read as HDF5 (is it readable?)", ctx);
  }
  Hid fapl = file_access();
  impl->file = file_hid(H5Fopen(path.c_str(), H5F_ACC_RDONLY, fapl.get()));
  if (!impl->file) fail_hdf5(ErrorKind::input, "cannot open the HDF5 file", ctx);
  return open_dataset(std::move(impl));
}

FrameSource FrameSource::open_image(std::span<const std::byte> image, const std::string& name,
                                    const std::string& dataset_in) {
  Lock lock;
  auto impl = std::make_unique<Impl>();
  impl->path = name;
  impl->dataset = dataset_in.empty() ? std::string() : absolute_path(dataset_in);
  const ErrorContext ctx = impl->ctx();
  if (image.empty()) fail_input("this is not an HDF5 file (it is empty)", ctx);
  // The core driver without a backing store: the file lives in memory only,
  // on HDF5's own copy of the bytes.
  Hid fapl = plist_hid(H5Pcreate(H5P_FILE_ACCESS));
  if (!fapl || H5Pset_fapl_core(fapl.get(), 1 << 16, false) < 0 ||
      H5Pset_file_image(fapl.get(), const_cast<std::byte*>(image.data()), image.size()) < 0)
    fail_hdf5(ErrorKind::input, "cannot prepare the in-memory file", ctx);
  // HDF5 takes two core-driver files of one name for the same open file
  // (and shares its state, freed image included): a name of its own each.
  static std::uint64_t images = 0; // guarded by the lock
  const std::string unique = "memory-image-" + std::to_string(++images) + "/" + name;
  impl->file = file_hid(H5Fopen(unique.c_str(), H5F_ACC_RDONLY, fapl.get()));
  if (!impl->file) fail_hdf5(ErrorKind::input, "cannot open the HDF5 file", ctx);
  return open_dataset(std::move(impl));
}

FrameSource FrameSource::open_dataset(std::unique_ptr<Impl> impl) {
  const ErrorContext ctx = impl->ctx();
  const std::string& path = impl->path;
  if (impl->dataset.empty())
    fail_input("no dataset was given; " + dataset_list(impl->file.get()), ctx);
  switch (path_kind(impl->file.get(), impl->dataset)) {
  case PathKind::dataset: break;
  case PathKind::none:
    fail_input("there is no dataset " + impl->dataset + " in the file; " + dataset_list(impl->file.get()), ctx);
  case PathKind::group:
    fail_input(impl->dataset + " is a group, not a dataset; " + dataset_list(impl->file.get()), ctx);
  case PathKind::other:
    fail_input(impl->dataset + " is not a dataset (a named datatype?); " + dataset_list(impl->file.get()), ctx);
  }

  // Open once without tuning to learn the layout, then reopen with a chunk
  // cache that fits one frame's chunks.
  Hid probe = dataset_hid(H5Dopen2(impl->file.get(), impl->dataset.c_str(), H5P_DEFAULT));
  if (!probe) fail_hdf5(ErrorKind::input, "cannot open the dataset", ctx);
  Hid type = type_hid(H5Dget_type(probe.get()));
  Hid space = space_hid(H5Dget_space(probe.get()));
  Hid dcpl = plist_hid(H5Dget_create_plist(probe.get()));
  if (!type || !space || !dcpl) fail_hdf5(ErrorKind::input, "cannot read the dataset's type and shape", ctx);

  if (const std::string why = damaged_layout(type.get()); !why.empty())
    fail_input("the dataset's element type is damaged: " + why, ctx);
  if (!classify(type.get(), impl->type))
    fail_input("the dataset has element type " + describe_type(type.get()) +
                   "; expected camera frames of an integer type (uint8, uint16, int16, uint32, ...) or "
                   "float32/float64",
               ctx);
  if (H5Sget_simple_extent_type(space.get()) != H5S_SIMPLE)
    fail_input("the dataset is a scalar (or has no dataspace); expected one frame (H,W) or a stack of frames (N,H,W)", ctx);
  const auto shape = space_shape(space.get());
  impl->rank = static_cast<int>(shape.size());
  if (impl->rank == 1)
    fail_input("the dataset is one-dimensional (" + shape_text(shape) +
                   "); expected one frame (H,W) or a stack of frames (N,H,W)",
               ctx);
  if (impl->rank > 3)
    fail_input("the dataset has " + std::to_string(impl->rank) + " dimensions (" + shape_text(shape) +
                   "); expected one frame (H,W) or a stack of frames (N,H,W)",
               ctx);
  if (std::find(shape.begin(), shape.end(), 0) != shape.end())
    fail_input("the dataset has an empty dimension (" + shape_text(shape) + "), so there are no frames to read", ctx);
  impl->n = impl->rank == 3 ? static_cast<std::size_t>(shape[0]) : 1;
  impl->h = static_cast<std::size_t>(shape[shape.size() - 2]);
  impl->w = static_cast<std::size_t>(shape[shape.size() - 1]);
  constexpr std::size_t min_side = 16;
  if (impl->h < min_side || impl->w < min_side)
    fail_input("the dataset has frames of " + std::to_string(impl->h) + "x" + std::to_string(impl->w) +
                   " pixels; at least 16x16 are needed",
               ctx);
  // Every frame in flight holds several float and complex copies: refuse a
  // declared size (e.g. an unwritten chunked dataset) before allocating.
  if (impl->h > max_frame_pixels / impl->w)
    fail_input("the dataset has frames of " + std::to_string(impl->h) + "x" + std::to_string(impl->w) +
                   " pixels, too large to process: at most " + std::to_string(max_frame_pixels) +
                   " pixels per frame (e.g. 16384x16384)",
               ctx);

  Hid dapl = plist_hid(H5Pcreate(H5P_DATASET_ACCESS));
  tune_chunk_cache(dapl.get(), dcpl.get(), H5Tget_size(type.get()), impl->h, impl->w, path, impl->dataset,
                   impl->chunk);
  probe.reset();
  impl->dset = dataset_hid(H5Dopen2(impl->file.get(), impl->dataset.c_str(), dapl.get()));
  if (!impl->dset) fail_hdf5(ErrorKind::input, "cannot open the dataset", ctx);
  impl->file_space = space_hid(H5Dget_space(impl->dset.get()));
  const hsize_t mdims[2] = {impl->h, impl->w};
  impl->mem_space = space_hid(H5Screate_simple(2, mdims, nullptr));
  impl->mem_stride = impl->w;
  impl->xfer = plist_hid(H5Pcreate(H5P_DATASET_XFER));
  if (!impl->file_space || !impl->mem_space || !impl->xfer)
    fail_hdf5(ErrorKind::input, "cannot prepare reading the dataset", ctx);

  // Give HDF5 a conversion buffer of one whole frame so each read converts
  // in one pass without allocating. At most 64 MiB (4096x4096 to float):
  // larger frames convert in strips, and a damaged file claiming a huge
  // frame does not make open() zero a gigabyte.
  if (impl->type != DType::f32 || H5Tget_order(type.get()) != H5T_ORDER_LE) {
    const std::size_t elems = impl->h * impl->w;
    constexpr std::size_t max_conversion_bytes = std::size_t{64} << 20;
    impl->conversion.resize(
        std::min(elems * std::max<std::size_t>(H5Tget_size(type.get()), sizeof(float)), max_conversion_bytes));
    if (H5Pset_buffer(impl->xfer.get(), impl->conversion.size(), impl->conversion.data(), nullptr) < 0)
      fail_hdf5(ErrorKind::input, "cannot prepare the type conversion", ctx);
  }
  return FrameSource(std::move(impl));
}

std::size_t FrameSource::count() const noexcept { return impl_->n; }
std::size_t FrameSource::height() const noexcept { return impl_->h; }
std::size_t FrameSource::width() const noexcept { return impl_->w; }
int FrameSource::rank() const noexcept { return impl_->rank; }
DType FrameSource::dtype() const noexcept { return impl_->type; }
const std::string& FrameSource::path() const noexcept { return impl_->path; }
const std::string& FrameSource::dataset() const noexcept { return impl_->dataset; }
const std::vector<std::uint64_t>& FrameSource::chunk() const noexcept { return impl_->chunk; }

std::vector<Attribute> FrameSource::attributes() const {
  Lock lock;
  return read_all_attributes(impl_->dset.get());
}

void FrameSource::read(std::size_t frame, ImageView<float> out) {
  Impl& m = *impl_;
  ErrorContext ctx = m.ctx();
  ctx.frame = static_cast<std::int64_t>(frame);
  if (frame >= m.n)
    fail_input("frame " + std::to_string(frame) + " is out of range: the dataset has " + std::to_string(m.n) +
                   (m.n == 1 ? " frame (index 0)" : " frames (0 to " + std::to_string(m.n - 1) + ")"),
               ctx);
  if (out.height() != m.h || out.width() != m.w || out.stride() < out.width() || !out.data())
    fail_internal("FrameSource::read needs a " + std::to_string(m.h) + "x" + std::to_string(m.w) +
                      " buffer, got " + std::to_string(out.height()) + "x" + std::to_string(out.width()),
                  ctx);
  Lock lock;
  if (out.stride() != m.mem_stride) {
    // A strided destination: a (h, stride) memory space with an (h, w) window.
    const hsize_t mdims[2] = {m.h, out.stride()};
    Hid ms = space_hid(H5Screate_simple(2, mdims, nullptr));
    const hsize_t start[2] = {0, 0}, count[2] = {m.h, m.w};
    if (!ms || H5Sselect_hyperslab(ms.get(), H5S_SELECT_SET, start, nullptr, count, nullptr) < 0)
      fail_hdf5(ErrorKind::input, "cannot prepare the memory layout", ctx);
    m.mem_space = std::move(ms);
    m.mem_stride = out.stride();
  }
  herr_t sel;
  if (m.rank == 3) {
    const hsize_t start[3] = {frame, 0, 0}, count[3] = {1, m.h, m.w};
    sel = H5Sselect_hyperslab(m.file_space.get(), H5S_SELECT_SET, start, nullptr, count, nullptr);
  } else {
    sel = H5Sselect_all(m.file_space.get());
  }
  if (sel < 0) fail_hdf5(ErrorKind::input, "cannot select the frame", ctx);
  if (H5Dread(m.dset.get(), H5T_NATIVE_FLOAT, m.mem_space.get(), m.file_space.get(), m.xfer.get(), out.data()) < 0)
    fail_hdf5(ErrorKind::input, "cannot read the frame", ctx);
  if (m.type == DType::f32 || m.type == DType::f64) refuse_non_finite(m.type, out, ctx);
}

namespace {
hid_t native_type(DType t) {
  switch (t) {
  case DType::u8: return H5T_NATIVE_UINT8;
  case DType::i8: return H5T_NATIVE_INT8;
  case DType::u16: return H5T_NATIVE_UINT16;
  case DType::i16: return H5T_NATIVE_INT16;
  case DType::u32: return H5T_NATIVE_UINT32;
  case DType::i32: return H5T_NATIVE_INT32;
  case DType::u64: return H5T_NATIVE_UINT64;
  case DType::i64: return H5T_NATIVE_INT64;
  case DType::f32: return H5T_NATIVE_FLOAT;
  case DType::f64: return H5T_NATIVE_DOUBLE;
  }
  return H5T_NATIVE_FLOAT;
}

template <class T> void convert_rows(const T* src, ImageView<float> out) {
  for (std::size_t y = 0; y < out.height(); ++y) {
    const T* s = src + y * out.width();
    float* d = out.row(y);
    for (std::size_t x = 0; x < out.width(); ++x) d[x] = static_cast<float>(s[x]);
  }
}
} // namespace

std::size_t dtype_size(DType t) {
  switch (t) {
  case DType::u8:
  case DType::i8: return 1;
  case DType::u16:
  case DType::i16: return 2;
  case DType::u32:
  case DType::i32:
  case DType::f32: return 4;
  case DType::u64:
  case DType::i64:
  case DType::f64: return 8;
  }
  return 4;
}

std::size_t FrameSource::raw_frame_bytes() const noexcept { return impl_->h * impl_->w * dtype_size(impl_->type); }

void FrameSource::read_raw(std::size_t frame, void* dst) {
  Impl& m = *impl_;
  ErrorContext ctx = m.ctx();
  ctx.frame = static_cast<std::int64_t>(frame);
  if (frame >= m.n)
    fail_input("frame " + std::to_string(frame) + " is out of range: the dataset has " + std::to_string(m.n) +
                   (m.n == 1 ? " frame (index 0)" : " frames (0 to " + std::to_string(m.n - 1) + ")"),
               ctx);
  Lock lock;
  // The raw path always uses a contiguous (h, w) memory space.
  const hsize_t mdims[2] = {m.h, m.w};
  if (!m.raw_space) m.raw_space = space_hid(H5Screate_simple(2, mdims, nullptr));
  herr_t sel;
  if (m.rank == 3) {
    const hsize_t start[3] = {frame, 0, 0}, count[3] = {1, m.h, m.w};
    sel = H5Sselect_hyperslab(m.file_space.get(), H5S_SELECT_SET, start, nullptr, count, nullptr);
  } else {
    sel = H5Sselect_all(m.file_space.get());
  }
  if (!m.raw_space || sel < 0) fail_hdf5(ErrorKind::input, "cannot select the frame", ctx);
  if (H5Dread(m.dset.get(), native_type(m.type), m.raw_space.get(), m.file_space.get(), m.xfer.get(), dst) < 0)
    fail_hdf5(ErrorKind::input, "cannot read the frame", ctx);
}

void FrameSource::convert_raw(DType type, const void* src, ImageView<float> out) {
  switch (type) {
  case DType::u8: return convert_rows(static_cast<const std::uint8_t*>(src), out);
  case DType::i8: return convert_rows(static_cast<const std::int8_t*>(src), out);
  case DType::u16: return convert_rows(static_cast<const std::uint16_t*>(src), out);
  case DType::i16: return convert_rows(static_cast<const std::int16_t*>(src), out);
  case DType::u32: return convert_rows(static_cast<const std::uint32_t*>(src), out);
  case DType::i32: return convert_rows(static_cast<const std::int32_t*>(src), out);
  case DType::u64: return convert_rows(static_cast<const std::uint64_t*>(src), out);
  case DType::i64: return convert_rows(static_cast<const std::int64_t*>(src), out);
  case DType::f32: return convert_rows(static_cast<const float*>(src), out);
  case DType::f64: return convert_rows(static_cast<const double*>(src), out);
  }
}

namespace {
/// Largest value of an integer type, 0 for floats.
double type_max(DType t) {
  switch (t) {
  case DType::u8: return 255.0;
  case DType::i8: return 127.0;
  case DType::u16: return 65535.0;
  case DType::i16: return 32767.0;
  case DType::u32: return 4294967295.0;
  case DType::i32: return 2147483647.0;
  case DType::u64: return static_cast<double>(std::numeric_limits<std::uint64_t>::max());
  case DType::i64: return static_cast<double>(std::numeric_limits<std::int64_t>::max());
  default: return 0.0;
  }
}

std::string number_text(double v) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.9g", v);
  return buf;
}
} // namespace

void FrameSource::check_frame(std::size_t frame, ImageView<const float> data) const {
  const Impl& m = *impl_;
  ErrorContext ctx = m.ctx();
  ctx.frame = static_cast<std::int64_t>(frame);
  if (m.type == DType::f32 || m.type == DType::f64) refuse_non_finite(m.type, data, ctx);
  // A blank frame: every pixel equal. The scan stops at the first pixel that
  // differs, which in a real hologram is the second one.
  if (data.height() == 0 || data.width() == 0) return;
  const float v = data.row(0)[0];
  for (std::size_t y = 0; y < data.height(); ++y) {
    const float* r = data.row(y);
    for (std::size_t x = 0; x < data.width(); ++x)
      if (r[x] != v) return;
  }
  std::string why;
  const double max = type_max(m.type);
  if (v == 0.0f) {
    why = "is all zero (did light reach the camera?)";
  } else if (max > 0 && v == static_cast<float>(max)) {
    why = "is saturated: every pixel is " + number_text(v) + ", the " + std::string(io::dtype_name(m.type)) +
          " maximum";
  } else {
    // A camera of fewer bits than its container type saturates at 2^bits - 1.
    for (int bits : {10, 12, 14})
      if (max > 0 && static_cast<double>(v) == std::ldexp(1.0, bits) - 1.0 && std::ldexp(1.0, bits) - 1.0 < max)
        why = "is saturated: every pixel is " + number_text(v) + ", the maximum of a " + std::to_string(bits) +
              "-bit camera";
    if (why.empty()) why = "is blank: every pixel is " + number_text(v);
  }
  log::warn("frame " + std::to_string(frame) + " of " + m.path + ":" + m.dataset + " " + why +
                "; it holds no fringes, so its results carry no information",
            "blank-frame:" + m.path + ":" + m.dataset + ":" + std::to_string(frame));
}

} // namespace wavestack::io
