#include "wavestack/io/frame_sink.hpp"

#include "hdf5_util.hpp"

#include <unistd.h>

#include <algorithm>
#include <cmath>
#include <cstring>
#include <ctime>
#include <filesystem>
#include <limits>
#include <type_traits>

#ifndef WAVESTACK_VERSION
#define WAVESTACK_VERSION "unknown"
#endif

namespace wavestack::io {

using namespace detail;
namespace fs = std::filesystem;

namespace {

constexpr const char* index_name = "/frames/index";
constexpr const char* done_name = "/frames/done";
constexpr const char* focus_name = "/focus/distance";

/// compound {r: f32, i: f32} of 8 bytes: the layout of std::complex<float>
/// (array-compatible by [complex.numbers]) and the names h5py maps to complex64.
Hid make_complex_type(hid_t member) {
  Hid t = type_hid(H5Tcreate(H5T_COMPOUND, 2 * sizeof(float)));
  if (!t || H5Tinsert(t.get(), "r", 0, member) < 0 || H5Tinsert(t.get(), "i", sizeof(float), member) < 0)
    return {};
  return t;
}

hid_t file_value_type(ValueType t) {
  switch (t) {
  case ValueType::u8: return H5T_STD_U8LE;
  case ValueType::i64: return H5T_STD_I64LE;
  case ValueType::f32: return H5T_IEEE_F32LE;
  case ValueType::f64: return H5T_IEEE_F64LE;
  }
  return H5T_IEEE_F64LE;
}

/// File access of the output: no sieve buffer, so the small per-frame
/// writes (done flags, records) reach the kernel at once, in order after the
/// frame's images, and survive a kill of the process. (The metadata cache
/// is capped by file_access, as for every file.)
Hid output_access() {
  Hid fapl = file_access(true);
  if (!fapl) return fapl;
  H5Pset_sieve_buf_size(fapl.get(), 0);
  take_hdf5_message();
  return fapl;
}

} // namespace

struct ProductInfo {
  std::string name; ///< absolute path in the file
  bool image = false;
  ImageType itype = ImageType::f32;
  ValueType vtype = ValueType::f64;
  std::size_t rows = 0, cols = 0; ///< image: h (Z·h for a z-stack), w; matrix: rows, cols; vector: length, 0
  std::size_t planes = 0;         ///< z-stack image (N,Z,h,w): Z; 0 for (N,h,w)
  bool per_frame = true;          ///< one entry per output frame (listed in frame_datasets)
  std::size_t elem_size = 0;
  Hid dset, file_space, mem_space;
  std::size_t mem_stride = 0;
};

struct FrameSink::Impl {
  std::string final_path, partial;
  std::size_t n = 0;
  CompressionOptions comp;
  Hid file, complex_mem, complex_file, one_space;
  std::vector<ProductInfo> products;
  Product index_p = 0, done_p = 0, focus_p = 0;
  std::vector<std::uint8_t> done;
  std::size_t done_prefix = 0;
  /// Compressed output: frames written but not yet marked done in the file;
  /// their chunk index reaches the file only at the next checkpoint().
  std::vector<std::pair<std::size_t, std::int64_t>> pending;
  bool frame_list_written = false;
  bool finished = false;
  struct TableInfo {
    std::string name;
    std::vector<TableColumn> columns;
    std::size_t rows = 0;
    Hid dset, mem;
  };
  std::vector<TableInfo> tables;
  std::vector<unsigned char> table_buffer; ///< rows being written, reused

  ErrorContext ctx(const std::string& dataset = {}) const { return where(partial, dataset); }
  ErrorContext ctx(const ProductInfo& p, std::size_t frame) const {
    return where(partial, p.name, static_cast<std::int64_t>(frame));
  }

  ProductInfo& get(Product p) {
    if (p >= products.size()) fail_internal("FrameSink: unknown product handle " + std::to_string(p), ctx());
    return products[p];
  }

  /// Write /frames/index and /frames/done of the pending frames.
  void write_done_flags(std::size_t frame, std::int64_t source_index) {
    write_scalar(index_p, frame, H5T_NATIVE_INT64, &source_index);
    const std::uint8_t one = 1;
    write_scalar(done_p, frame, H5T_NATIVE_UINT8, &one);
  }

  /// Crash-safe order for compressed output: first every chunk and its index
  /// entry reach the file, then the done flags of those frames, then those too.
  void checkpoint() {
    if (!frame_list_written) {
      // Which datasets have one entry per frame: what `merge` joins.
      std::string list;
      for (const auto& p : products)
        if (p.per_frame) list.append(list.empty() ? "" : "\n").append(p.name);
      write_attribute(file.get(), "frame_datasets", list, ErrorKind::output, ctx("/"));
      frame_list_written = true;
    }
    if (H5Fflush(file.get(), H5F_SCOPE_GLOBAL) < 0)
      fail_hdf5(ErrorKind::output, "could not flush the output file", ctx());
    if (pending.empty()) return;
    for (const auto& [frame, source] : pending) write_done_flags(frame, source);
    pending.clear();
    if (H5Fflush(file.get(), H5F_SCOPE_GLOBAL) < 0)
      fail_hdf5(ErrorKind::output, "could not flush the output file", ctx());
  }

  /// A frame counts as done only if every compressed image has its chunk in
  /// the file, inside the file's end; frames from the first one that fails
  /// are written again.
  void trust_only_stored_chunks() {
    const auto file_size = static_cast<haddr_t>(fs::file_size(partial));
    for (std::size_t f = 0; f < done_prefix; ++f) {
      for (const auto& p : products) {
        if (!p.image) continue;
        const hsize_t offset[4] = {f, 0, 0, 0};
        unsigned mask = 0;
        haddr_t addr = HADDR_UNDEF;
        hsize_t size = 0;
        const bool stored = H5Dget_chunk_info_by_coord(p.dset.get(), offset, &mask, &addr, &size) >= 0 &&
                            addr != HADDR_UNDEF && size > 0 && addr + size <= file_size;
        if (!stored) {
          take_hdf5_message();
          std::fill(done.begin() + static_cast<std::ptrdiff_t>(f), done.end(), std::uint8_t{0});
          done_prefix = f;
          return;
        }
      }
    }
  }

  void close_all() noexcept {
    // A clean close (an error path) writes every frame that is complete.
    if (file && !pending.empty()) {
      try {
        for (const auto& [frame, source] : pending) write_done_flags(frame, source);
      } catch (...) {
      }
      pending.clear();
    }
    tables.clear();
    products.clear();
    one_space.reset();
    complex_mem.reset();
    complex_file.reset();
    file.reset();
  }

  void init_types() {
    complex_mem = make_complex_type(H5T_NATIVE_FLOAT);
    complex_file = make_complex_type(H5T_IEEE_F32LE);
    const hsize_t one = 1;
    one_space = space_hid(H5Screate_simple(1, &one, nullptr));
    if (!complex_mem || !complex_file || !one_space)
      fail_hdf5(ErrorKind::output, "could not prepare the HDF5 types", ctx());
  }

  /// Register an open dataset as a product.
  Product adopt(ProductInfo p) {
    p.file_space = space_hid(H5Dget_space(p.dset.get()));
    if (!p.file_space) fail_hdf5(ErrorKind::output, "could not read the dataspace", ctx(p.name));
    if (p.image) {
      // Same rank and shape as the file selection, so HDF5 copies whole
      // rows instead of iterating element by element.
      const hsize_t mdims[2] = {p.rows, p.cols};
      const hsize_t mdims4[4] = {1, p.planes, p.planes ? p.rows / std::max<std::size_t>(p.planes, 1) : p.rows, p.cols};
      p.mem_space = p.planes ? space_hid(H5Screate_simple(4, mdims4, nullptr))
                             : space_hid(H5Screate_simple(2, mdims, nullptr));
      p.mem_stride = p.cols;
      if (!p.mem_space) fail_hdf5(ErrorKind::output, "could not prepare the memory layout", ctx(p.name));
    }
    products.push_back(std::move(p));
    return products.size() - 1;
  }

  /// Dataset access for images: no chunk cache, so a whole-frame chunk goes
  /// straight from the caller's buffer to the file.
  Hid image_dapl() {
    Hid dapl = plist_hid(H5Pcreate(H5P_DATASET_ACCESS));
    if (!dapl || H5Pset_chunk_cache(dapl.get(), H5D_CHUNK_CACHE_NSLOTS_DEFAULT, 0, H5D_CHUNK_CACHE_W0_DEFAULT) < 0)
      fail_hdf5(ErrorKind::output, "could not prepare the dataset access", ctx());
    return dapl;
  }

  Product create_table(const std::string& name_in, ValueType type, std::size_t rows, std::size_t cols,
                       const std::string& units, const Attributes& extra) {
    const std::string name = absolute_path(name_in);
    const ErrorContext c = ctx(name);
    for (const auto& p : products)
      if (p.name == name) fail_internal("FrameSink: product " + name + " declared twice", c);
    if (rows == 0) fail_internal("FrameSink: table " + name + " with no rows", c);
    create_parent_groups(file.get(), name, ErrorKind::output, c);
    const hsize_t dims[2] = {rows, cols};
    Hid space = space_hid(H5Screate_simple(cols ? 2 : 1, dims, nullptr));
    Hid dcpl = plist_hid(H5Pcreate(H5P_DATASET_CREATE));
    // Storage exists from the start: a later write changes no metadata, so a
    // killed run leaves a file whose structure is the one flushed at setup.
    if (!space || !dcpl || H5Pset_alloc_time(dcpl.get(), H5D_ALLOC_TIME_EARLY) < 0)
      fail_hdf5(ErrorKind::output, "could not prepare the dataset " + name, c);
    const double nan = std::numeric_limits<double>::quiet_NaN();
    const std::int64_t minus_one = -1, zero = 0;
    const bool is_index = name == index_name;
    if (type == ValueType::f32 || type == ValueType::f64)
      H5Pset_fill_value(dcpl.get(), H5T_NATIVE_DOUBLE, &nan);
    else
      H5Pset_fill_value(dcpl.get(), H5T_NATIVE_INT64, is_index ? &minus_one : &zero);
    ProductInfo p;
    p.name = name;
    p.vtype = type;
    p.per_frame = rows == n;
    p.rows = rows;
    p.cols = cols;
    p.elem_size = H5Tget_size(file_value_type(type));
    p.dset = dataset_hid(
        H5Dcreate2(file.get(), name.c_str(), file_value_type(type), space.get(), H5P_DEFAULT, dcpl.get(), H5P_DEFAULT));
    if (!p.dset) fail_hdf5(ErrorKind::output, "could not create the dataset " + name, c);
    write_attribute(p.dset.get(), "units", units, ErrorKind::output, c);
    for (const auto& a : extra) write_attribute(p.dset.get(), a.name, a.value, ErrorKind::output, c);
    return adopt(std::move(p));
  }

  void write_table(Product id, hsize_t offset, hsize_t count, hid_t mem_type, const void* data, hid_t mem_space) {
    ProductInfo& p = get(id);
    ErrorContext c = ctx(p.name);
    if (p.image) fail_internal("FrameSink: " + p.name + " is an image, not a table", c);
    herr_t sel;
    if (p.cols) {
      const hsize_t row = offset / p.cols, start[2] = {row, 0}, cnt[2] = {count / p.cols, p.cols};
      sel = H5Sselect_hyperslab(p.file_space.get(), H5S_SELECT_SET, start, nullptr, cnt, nullptr);
    } else {
      sel = H5Sselect_hyperslab(p.file_space.get(), H5S_SELECT_SET, &offset, nullptr, &count, nullptr);
    }
    if (sel < 0 || H5Dwrite(p.dset.get(), mem_type, mem_space, p.file_space.get(), H5P_DEFAULT, data) < 0)
      fail_hdf5(ErrorKind::output, "could not write to " + p.name, c);
  }

  void write_scalar(Product id, std::size_t index, hid_t mem_type, const void* value) {
    ProductInfo& p = get(id);
    if (p.cols) fail_internal("FrameSink: " + p.name + " is a matrix; use write_row", ctx(p.name));
    if (index >= p.rows)
      fail_internal("FrameSink: index " + std::to_string(index) + " outside " + p.name + " (length " +
                        std::to_string(p.rows) + ")",
                    ctx(p.name));
    write_table(id, index, 1, mem_type, value, one_space.get());
  }

  void write_image(Product id, std::size_t frame, const void* data, std::size_t h, std::size_t w,
                   std::size_t stride, bool complex) {
    ProductInfo& p = get(id);
    const ErrorContext c = ctx(p, frame);
    if (!p.image) fail_internal("FrameSink: " + p.name + " is not an image product", c);
    if ((p.itype == ImageType::complex64) != complex)
      fail_internal("FrameSink: " + p.name + " holds " + (complex ? "float32" : "complex64") + " values", c);
    if (h != p.rows || w != p.cols)
      fail_internal("FrameSink: " + p.name + " frames are " + std::to_string(p.rows) + "x" + std::to_string(p.cols) +
                        ", got " + std::to_string(h) + "x" + std::to_string(w),
                    c);
    if (frame >= n) fail_internal("FrameSink: frame " + std::to_string(frame) + " beyond " + std::to_string(n), c);
    if (stride != p.mem_stride) {
      if (p.planes) fail_internal("FrameSink: z-stack frames must be contiguous", c);
      const hsize_t mdims[2] = {h, stride}, start[2] = {0, 0}, cnt[2] = {h, w};
      Hid ms = space_hid(H5Screate_simple(2, mdims, nullptr));
      if (!ms || H5Sselect_hyperslab(ms.get(), H5S_SELECT_SET, start, nullptr, cnt, nullptr) < 0)
        fail_hdf5(ErrorKind::output, "could not prepare the memory layout", c);
      p.mem_space = std::move(ms);
      p.mem_stride = stride;
    }
    const hsize_t start[4] = {frame, 0, 0, 0};
    const hsize_t cnt3[3] = {1, h, w}, cnt4[4] = {1, p.planes, p.planes ? h / p.planes : h, w};
    if (H5Sselect_hyperslab(p.file_space.get(), H5S_SELECT_SET, start, nullptr, p.planes ? cnt4 : cnt3, nullptr) < 0 ||
        H5Dwrite(p.dset.get(), complex ? complex_mem.get() : H5T_NATIVE_FLOAT, p.mem_space.get(), p.file_space.get(),
                 H5P_DEFAULT, data) < 0)
      fail_hdf5(ErrorKind::output, "could not write the frame", c);
  }
};

std::string FrameSink::partial_path(const std::string& final_path) { return final_path + ".partial"; }

FrameSink::FrameSink(std::unique_ptr<Impl> impl) : impl_(std::move(impl)) {}
FrameSink::FrameSink(FrameSink&&) noexcept = default;
FrameSink& FrameSink::operator=(FrameSink&& o) noexcept {
  if (this != &o) {
    Lock lock;
    if (impl_) impl_->close_all();
    impl_ = std::move(o.impl_);
  }
  return *this;
}
FrameSink::~FrameSink() {
  if (!impl_) return;
  Lock lock;
  impl_->close_all(); // an unfinished file stays at the .partial path for --resume
  take_hdf5_message();
  impl_.reset();
}

namespace {
void check_output_folder(const std::string& final_path) {
  const ErrorContext c = where(final_path);
  fs::path parent = fs::path(final_path).parent_path();
  if (parent.empty()) parent = ".";
  std::error_code ec;
  if (!fs::exists(parent, ec))
    fail_output("cannot write the output: the folder '" + parent.string() + "' does not exist", c);
  if (!fs::is_directory(parent, ec))
    fail_output("cannot write the output: '" + parent.string() + "' is not a folder", c);
  if (::access(parent.c_str(), W_OK | X_OK) != 0)
    fail_output("cannot write the output: the folder '" + parent.string() + "' is not writable", c);
  if (fs::is_directory(final_path, ec))
    fail_output("cannot write the output: the output path is a folder", c);
}
} // namespace

FrameSink FrameSink::create(const std::string& final_path, std::size_t frames, const SinkInfo& info,
                            CompressionOptions compression) {
  if (frames == 0) fail_internal("FrameSink: an output file needs at least one frame", where(final_path));
  if (compression.method == Compression::deflate && (compression.level < 1 || compression.level > 9))
    fail_internal("deflate level must be 1-9, got " + std::to_string(compression.level), where(final_path));
  check_output_folder(final_path);

  Lock lock;
  auto m = std::make_unique<Impl>();
  m->final_path = final_path;
  m->partial = partial_path(final_path);
  m->n = frames;
  m->comp = compression;
  Hid fapl = output_access();
  m->file = file_hid(H5Fcreate(m->partial.c_str(), H5F_ACC_TRUNC, H5P_DEFAULT, fapl.get()));
  if (!m->file) fail_hdf5(ErrorKind::output, "cannot create the output file", m->ctx());
  m->init_types();

  const ErrorContext c = m->ctx("/");
  const hid_t root = m->file.get();
  write_attribute(root, "format", std::string("wavestack"), ErrorKind::output, c);
  write_attribute(root, "format_version", std::int64_t{1}, ErrorKind::output, c);
  write_attribute(root, "software_version",
                  info.software_version.empty() ? std::string(WAVESTACK_VERSION) : info.software_version,
                  ErrorKind::output, c);
  write_attribute(root, "created", iso8601_utc_now(), ErrorKind::output, c);
  write_attribute(root, "pipeline", info.pipeline, ErrorKind::output, c);
  write_attribute(root, "source_file", info.source_file, ErrorKind::output, c);
  write_attribute(root, "source_dataset", info.source_dataset, ErrorKind::output, c);

  m->index_p = m->create_table(index_name, ValueType::i64, frames, 0, "1", {});
  m->done_p = m->create_table(done_name, ValueType::u8, frames, 0, "1", {});
  m->focus_p = m->create_table(focus_name, ValueType::f64, frames, 0, "m", {});
  m->done.assign(frames, 0);
  return FrameSink(std::move(m));
}

std::string FrameSink::read_pipeline_text(const std::string& path) {
  return read_string_attribute(path, "/", "pipeline");
}

FrameSink FrameSink::open_for_resume(const std::string& path) {
  const std::string suffix = ".partial";
  const bool is_partial = path.size() > suffix.size() && path.ends_with(suffix);
  const std::string final_path = is_partial ? path.substr(0, path.size() - suffix.size()) : path;
  Lock lock;
  auto m = std::make_unique<Impl>();
  m->final_path = final_path;
  m->partial = partial_path(final_path);
  const ErrorContext c = m->ctx();
  std::error_code ec;
  if (!fs::exists(m->partial, ec))
    fail_output("cannot resume: there is no partial output file from an earlier run", c);
  if (H5Fis_hdf5(m->partial.c_str()) <= 0) {
    take_hdf5_message();
    fail_output("cannot resume: the partial output file is not a readable HDF5 file", c);
  }
  Hid fapl = output_access();
  m->file = file_hid(H5Fopen(m->partial.c_str(), H5F_ACC_RDWR, fapl.get()));
  if (!m->file) fail_hdf5(ErrorKind::output, "cannot resume: the partial output file cannot be opened for writing", c);
  m->init_types();

  // Must be ours, and of this format version.
  bool ours = false;
  for (const auto& a : read_all_attributes(m->file.get()))
    if (a.name == "format") ours = a.value == "wavestack";
  std::int64_t version = 0;
  if (ours) {
    Hid a = attr_hid(H5Aopen(m->file.get(), "format_version", H5P_DEFAULT));
    if (!a || H5Aread(a.get(), H5T_NATIVE_INT64, &version) < 0) take_hdf5_message();
  }
  if (!ours || version != 1)
    fail_output("cannot resume: the partial file is not a wavestack format_version 1 output file", c);

  std::vector<std::string> frame_datasets;
  for (const auto& a : read_all_attributes(m->file.get()))
    if (a.name == "frame_datasets") {
      std::size_t from = 0;
      while (from <= a.value.size()) {
        const std::size_t to = std::min(a.value.find('\n', from), a.value.size());
        frame_datasets.push_back(a.value.substr(from, to - from));
        from = to + 1;
      }
    }
  m->frame_list_written = !frame_datasets.empty();
  Hid dapl = m->image_dapl();
  for (const auto& d : detail::list_datasets(m->file.get(), std::numeric_limits<std::size_t>::max())) {
    ProductInfo p;
    p.name = d.path;
    const bool img = d.shape.size() == 3 || d.shape.size() == 4;
    Hid dset = dataset_hid(H5Dopen2(m->file.get(), d.path.c_str(), img ? dapl.get() : H5P_DEFAULT));
    Hid type = type_hid(dset ? H5Dget_type(dset.get()) : H5I_INVALID_HID);
    if (!dset || !type) fail_hdf5(ErrorKind::output, "cannot resume: cannot open " + d.path, c);
    const H5T_class_t cls = H5Tget_class(type.get());
    const std::size_t size = H5Tget_size(type.get());
    if (img && (d.shape.size() == 3 || cls != H5T_COMPOUND || size == 8)) {
      p.image = true;
      p.itype = cls == H5T_COMPOUND ? ImageType::complex64 : ImageType::f32;
      p.planes = d.shape.size() == 4 ? d.shape[1] : 0;
      p.rows = d.shape.size() == 4 ? d.shape[1] * d.shape[2] : d.shape[1];
      p.cols = d.shape.back();
      p.elem_size = p.itype == ImageType::complex64 ? 8 : 4;
    } else if (cls == H5T_COMPOUND) {
      // A result table written by finish() of a run killed while finishing:
      // it is written again, from the frames, when this run finishes.
      dset.reset();
      type.reset();
      if (H5Ldelete(m->file.get(), d.path.c_str(), H5P_DEFAULT) < 0)
        fail_hdf5(ErrorKind::output, "cannot resume: cannot remove the old table " + d.path, c);
      continue;
    } else if (d.shape.size() == 1 || d.shape.size() == 2) {
      p.rows = d.shape[0];
      p.cols = d.shape.size() == 2 ? d.shape[1] : 0;
      if (cls == H5T_INTEGER) p.vtype = size == 1 ? ValueType::u8 : ValueType::i64;
      else p.vtype = size == 4 ? ValueType::f32 : ValueType::f64;
      p.elem_size = size;
    } else {
      continue;
    }
    p.dset = std::move(dset);
    p.per_frame = std::find(frame_datasets.begin(), frame_datasets.end(), p.name) != frame_datasets.end();
    m->adopt(std::move(p));
  }
  auto find = [&](const char* name) -> Product {
    for (std::size_t i = 0; i < m->products.size(); ++i)
      if (m->products[i].name == name && !m->products[i].image && m->products[i].cols == 0) return i;
    fail_output(std::string("cannot resume: the partial file has no ") + name, c);
  };
  m->index_p = find(index_name);
  m->done_p = find(done_name);
  m->focus_p = find(focus_name);
  m->n = m->products[m->done_p].rows;

  for (const auto& p : m->products) {
    if (!p.image) continue;
    Hid dcpl = plist_hid(H5Dget_create_plist(p.dset.get()));
    unsigned flags = 0, config = 0, cd[8] = {0};
    std::size_t nelmts = 8;
    if (dcpl && H5Pget_filter_by_id2(dcpl.get(), H5Z_FILTER_DEFLATE, &flags, &nelmts, cd, 0, nullptr, &config) >= 0) {
      m->comp.method = Compression::deflate;
      m->comp.level = nelmts > 0 ? static_cast<int>(cd[0]) : 4;
    }
    take_hdf5_message();
    break;
  }

  m->done.assign(m->n, 0);
  if (H5Dread(m->products[m->done_p].dset.get(), H5T_NATIVE_UINT8, H5S_ALL, H5S_ALL, H5P_DEFAULT, m->done.data()) < 0)
    fail_hdf5(ErrorKind::output, "cannot resume: cannot read /frames/done", c);
  while (m->done_prefix < m->n && m->done[m->done_prefix]) ++m->done_prefix;
  if (m->comp.method == Compression::deflate) m->trust_only_stored_chunks();
  return FrameSink(std::move(m));
}

FrameSink::Product FrameSink::add_image(const std::string& name_in, ImageType type, std::size_t height,
                                        std::size_t width, const std::string& units, const Grid& grid,
                                        bool record_plane, const Attributes& extra) {
  return add_stack(name_in, type, 0, height, width, units, grid, record_plane, extra);
}

FrameSink::Product FrameSink::add_stack(const std::string& name_in, ImageType type, std::size_t planes,
                                        std::size_t height, std::size_t width, const std::string& units,
                                        const Grid& grid, bool record_plane, const Attributes& extra) {
  Lock lock;
  Impl& m = *impl_;
  const std::string name = absolute_path(name_in);
  const ErrorContext c = m.ctx(name);
  for (const auto& p : m.products)
    if (p.name == name) fail_internal("FrameSink: product " + name + " declared twice", c);
  if (height == 0 || width == 0) fail_internal("FrameSink: image " + name + " with an empty frame", c);
  create_parent_groups(m.file.get(), name, ErrorKind::output, c);

  const bool complex = type == ImageType::complex64;
  // One chunk is one frame: (1,h,w), or (1,Z,h,w) for a z-stack.
  const int rank = planes ? 4 : 3;
  const hsize_t dims3[3] = {m.n, height, width}, chunk3[3] = {1, height, width};
  const hsize_t dims4[4] = {m.n, planes, height, width}, chunk4[4] = {1, planes, height, width};
  Hid space = space_hid(H5Screate_simple(rank, planes ? dims4 : dims3, nullptr));
  Hid dcpl = plist_hid(H5Pcreate(H5P_DATASET_CREATE));
  if (!space || !dcpl || H5Pset_chunk(dcpl.get(), rank, planes ? chunk4 : chunk3) < 0)
    fail_hdf5(ErrorKind::output, "could not prepare the dataset", c);
  const float nan = std::numeric_limits<float>::quiet_NaN();
  const float nan2[2] = {nan, nan};
  if (H5Pset_fill_value(dcpl.get(), complex ? m.complex_mem.get() : H5T_NATIVE_FLOAT, complex ? nan2 : &nan) < 0)
    fail_hdf5(ErrorKind::output, "could not set the fill value", c);
  if (m.comp.method == Compression::deflate &&
      (H5Pset_shuffle(dcpl.get()) < 0 || H5Pset_deflate(dcpl.get(), static_cast<unsigned>(m.comp.level)) < 0))
    fail_hdf5(ErrorKind::output, "could not set up compression", c);
  // Uncompressed: every chunk is placed at creation (not filled: the space is
  // only reserved), so writing a frame is a plain write at a fixed offset
  // that changes no metadata, and a killed run cannot damage the file's
  // structure. Compressed chunks differ in size and are placed as written;
  // checkpoint() makes that safe.
  if (m.comp.method == Compression::none &&
      (H5Pset_alloc_time(dcpl.get(), H5D_ALLOC_TIME_EARLY) < 0 || H5Pset_fill_time(dcpl.get(), H5D_FILL_TIME_NEVER) < 0))
    fail_hdf5(ErrorKind::output, "could not set up the dataset storage", c);
  Hid dapl = m.image_dapl();

  ProductInfo p;
  p.name = name;
  p.image = true;
  p.itype = type;
  p.planes = planes;
  p.rows = planes ? planes * height : height;
  p.cols = width;
  p.elem_size = complex ? 2 * sizeof(float) : sizeof(float);
  p.dset = dataset_hid(H5Dcreate2(m.file.get(), name.c_str(), complex ? m.complex_file.get() : H5T_IEEE_F32LE,
                                  space.get(), H5P_DEFAULT, dcpl.get(), dapl.get()));
  if (!p.dset) fail_hdf5(ErrorKind::output, "could not create the dataset", c);
  const hid_t d = p.dset.get();
  write_attribute(d, "units", units, ErrorKind::output, c);
  write_attribute(d, "pixel_pitch", std::vector<double>{grid.dy, grid.dx}, ErrorKind::output, c);
  write_attribute(d, "wavelength", grid.wavelength, ErrorKind::output, c);
  write_attribute(d, "medium_index", grid.medium_index, ErrorKind::output, c);
  if (record_plane) write_attribute(d, "plane", grid.plane, ErrorKind::output, c);
  for (const auto& a : extra) write_attribute(d, a.name, a.value, ErrorKind::output, c);
  return m.adopt(std::move(p));
}

FrameSink::Product FrameSink::add_vector(const std::string& name, ValueType type, std::size_t length,
                                         const std::string& units, const Attributes& extra) {
  Lock lock;
  return impl_->create_table(name, type, length, 0, units, extra);
}

FrameSink::Product FrameSink::add_constant(const std::string& name, const std::vector<double>& values,
                                           const std::string& units) {
  Lock lock;
  Impl& m = *impl_;
  const Product id = m.create_table(name, ValueType::f64, values.size(), 0, units, {});
  m.products[id].per_frame = false;
  if (H5Dwrite(m.products[id].dset.get(), H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT, values.data()) < 0)
    fail_hdf5(ErrorKind::output, "could not write " + m.products[id].name, m.ctx(m.products[id].name));
  return id;
}

FrameSink::Product FrameSink::add_matrix(const std::string& name, ValueType type, std::size_t rows, std::size_t cols,
                                         const std::string& units, const Attributes& extra) {
  if (cols == 0) fail_internal("FrameSink: matrix " + name + " with no columns", impl_->ctx(name));
  Lock lock;
  return impl_->create_table(name, type, rows, cols, units, extra);
}

FrameSink::Product FrameSink::product(const std::string& name) const {
  const std::string n = absolute_path(name);
  for (std::size_t i = 0; i < impl_->products.size(); ++i)
    if (impl_->products[i].name == n) return i;
  fail_internal("FrameSink: no product named " + n, impl_->ctx(n));
}

bool FrameSink::has_product(const std::string& name) const {
  const std::string n = absolute_path(name);
  for (const auto& p : impl_->products)
    if (p.name == n) return true;
  return false;
}

std::vector<std::string> FrameSink::product_names() const {
  std::vector<std::string> out;
  for (const auto& p : impl_->products) out.push_back(p.name);
  return out;
}

std::string FrameSink::root_text_attribute(const std::string& name) const {
  Lock lock;
  for (const auto& a : read_all_attributes(impl_->file.get()))
    if (a.name == name) return a.value;
  return {};
}

void FrameSink::set_attribute(const std::string& object, const std::string& name, const AttributeValue& value) {
  Lock lock;
  Impl& m = *impl_;
  const std::string obj = absolute_path(object);
  const ErrorContext c = m.ctx(obj);
  if (obj == "/") return write_attribute(m.file.get(), name, value, ErrorKind::output, c);
  for (const auto& p : m.products)
    if (p.name == obj) return write_attribute(p.dset.get(), name, value, ErrorKind::output, c);
  if (path_kind(m.file.get(), obj) == PathKind::none)
    fail_internal("FrameSink: no object " + obj + " to attach the attribute '" + name + "' to", c);
  Hid o = object_hid(H5Oopen(m.file.get(), obj.c_str(), H5P_DEFAULT));
  if (!o) fail_hdf5(ErrorKind::output, "could not open " + obj, c);
  write_attribute(o.get(), name, value, ErrorKind::output, c);
}

void FrameSink::write_frame(Product p, std::size_t frame, ImageView<const float> data) {
  Lock lock;
  impl_->write_image(p, frame, data.data(), data.height(), data.width(), data.stride(), false);
}

void FrameSink::write_frame(Product p, std::size_t frame, ImageView<const cfloat> data) {
  Lock lock;
  impl_->write_image(p, frame, data.data(), data.height(), data.width(), data.stride(), true);
}

namespace {
template <class T>
void compress_view(const ProductInfo& p, const CompressionOptions& comp, ImageView<const T> data,
                   std::vector<unsigned char>& out, const std::string& file) {
  const ErrorContext c = where(file, p.name);
  if (comp.method != Compression::deflate)
    fail_internal("FrameSink: compress_frame called but the output is not compressed", c);
  if (!p.image || (p.itype == ImageType::complex64) != std::is_same_v<T, cfloat>)
    fail_internal("FrameSink: compress_frame with the wrong element type for " + p.name, c);
  if (data.height() != p.rows || data.width() != p.cols)
    fail_internal("FrameSink: compress_frame with the wrong frame size for " + p.name, c);
  const std::size_t row_bytes = data.width() * sizeof(T);
  if (data.contiguous()) return compress_chunk(data.data(), data.height() * row_bytes, sizeof(T), comp.level, out);
  thread_local std::vector<unsigned char> packed; // grows once per thread
  packed.resize(data.height() * row_bytes);
  for (std::size_t y = 0; y < data.height(); ++y) std::memcpy(packed.data() + y * row_bytes, data.row(y), row_bytes);
  compress_chunk(packed.data(), packed.size(), sizeof(T), comp.level, out);
}
} // namespace

void FrameSink::compress_frame(Product p, ImageView<const float> data, std::vector<unsigned char>& out) const {
  if (p >= impl_->products.size()) fail_internal("FrameSink: unknown product handle");
  compress_view(impl_->products[p], impl_->comp, data, out, impl_->partial);
}

void FrameSink::compress_frame(Product p, ImageView<const cfloat> data, std::vector<unsigned char>& out) const {
  if (p >= impl_->products.size()) fail_internal("FrameSink: unknown product handle");
  compress_view(impl_->products[p], impl_->comp, data, out, impl_->partial);
}

void FrameSink::write_frame_compressed(Product id, std::size_t frame, const unsigned char* bytes, std::size_t size) {
  Lock lock;
  Impl& m = *impl_;
  ProductInfo& p = m.get(id);
  const ErrorContext c = m.ctx(p, frame);
  if (m.comp.method != Compression::deflate)
    fail_internal("FrameSink: write_frame_compressed called but the output is not compressed", c);
  if (!p.image) fail_internal("FrameSink: " + p.name + " is not an image product", c);
  if (frame >= m.n) fail_internal("FrameSink: frame " + std::to_string(frame) + " beyond " + std::to_string(m.n), c);
  if (size == 0 || size > std::numeric_limits<std::uint32_t>::max())
    fail_internal("FrameSink: compressed chunk of " + std::to_string(size) + " bytes", c);
  const hsize_t offset[4] = {frame, 0, 0, 0};
  // Filter mask 0: every filter of the pipeline (shuffle, deflate) was applied.
  if (H5Dwrite_chunk(p.dset.get(), H5P_DEFAULT, 0, offset, size, bytes) < 0)
    fail_hdf5(ErrorKind::output, "could not write the compressed frame", c);
}

FrameSink::Table FrameSink::begin_table(const std::string& name_in, const std::vector<TableColumn>& columns,
                                        std::size_t rows) {
  Lock lock;
  Impl& m = *impl_;
  const std::string name = absolute_path(name_in);
  const ErrorContext c = m.ctx(name);
  if (columns.empty()) fail_internal("FrameSink: table " + name + " without columns", c);
  create_parent_groups(m.file.get(), name, ErrorKind::output, c);
  // Every field is 8 bytes: float64 or int64, packed in column order.
  const std::size_t rec = 8 * columns.size();
  Impl::TableInfo t;
  t.name = name;
  t.columns = columns;
  t.rows = rows;
  t.mem = type_hid(H5Tcreate(H5T_COMPOUND, rec));
  Hid filet = type_hid(H5Tcreate(H5T_COMPOUND, rec));
  if (!t.mem || !filet) fail_hdf5(ErrorKind::output, "could not make the table type", c);
  for (std::size_t k = 0; k < columns.size(); ++k) {
    const bool integer = columns[k].integer;
    if (H5Tinsert(t.mem.get(), columns[k].name.c_str(), 8 * k, integer ? H5T_NATIVE_INT64 : H5T_NATIVE_DOUBLE) < 0 ||
        H5Tinsert(filet.get(), columns[k].name.c_str(), 8 * k, integer ? H5T_STD_I64LE : H5T_IEEE_F64LE) < 0)
      fail_hdf5(ErrorKind::output, "could not add the column " + columns[k].name, c);
  }
  const hsize_t dims = rows;
  Hid space = space_hid(H5Screate_simple(1, &dims, nullptr));
  t.dset = dataset_hid(
      H5Dcreate2(m.file.get(), name.c_str(), filet.get(), space.get(), H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT));
  if (!space || !t.dset) fail_hdf5(ErrorKind::output, "could not create the table", c);
  std::string units;
  for (std::size_t k = 0; k < columns.size(); ++k) units += (k ? "," : "") + columns[k].units;
  write_attribute(t.dset.get(), "units", units, ErrorKind::output, c);
  m.tables.push_back(std::move(t));
  return m.tables.size() - 1;
}

void FrameSink::write_table_rows(Table id, std::size_t first_row, const double* values, std::size_t rows) {
  Lock lock;
  Impl& m = *impl_;
  if (id >= m.tables.size()) fail_internal("FrameSink: unknown table handle", m.ctx());
  Impl::TableInfo& t = m.tables[id];
  const ErrorContext c = m.ctx(t.name);
  if (first_row + rows > t.rows)
    fail_internal("FrameSink: rows " + std::to_string(first_row) + "+" + std::to_string(rows) + " beyond table " +
                      t.name,
                  c);
  if (rows == 0) return;
  const std::size_t cols = t.columns.size();
  m.table_buffer.resize(rows * cols * 8);
  for (std::size_t r = 0; r < rows; ++r)
    for (std::size_t k = 0; k < cols; ++k) {
      const double v = values[r * cols + k];
      unsigned char* dst = m.table_buffer.data() + (r * cols + k) * 8;
      if (t.columns[k].integer) {
        const std::int64_t i = std::isfinite(v) ? static_cast<std::int64_t>(std::llround(v)) : -1;
        std::memcpy(dst, &i, 8);
      } else {
        std::memcpy(dst, &v, 8);
      }
    }
  const hsize_t start = first_row, count = rows;
  Hid fs = space_hid(H5Dget_space(t.dset.get()));
  Hid ms = space_hid(H5Screate_simple(1, &count, nullptr));
  if (!fs || !ms || H5Sselect_hyperslab(fs.get(), H5S_SELECT_SET, &start, nullptr, &count, nullptr) < 0 ||
      H5Dwrite(t.dset.get(), t.mem.get(), ms.get(), fs.get(), H5P_DEFAULT, m.table_buffer.data()) < 0)
    fail_hdf5(ErrorKind::output, "could not write the table", c);
}

void FrameSink::write_table(const std::string& name, const std::vector<TableColumn>& columns,
                            const std::vector<double>& values) {
  if (columns.empty() || values.size() % columns.size() != 0)
    fail_internal("FrameSink: table " + name + " values are not whole rows", impl_->ctx(name));
  const std::size_t rows = values.size() / columns.size();
  const Table t = begin_table(name, columns, rows);
  write_table_rows(t, 0, values.data(), rows);
}

void FrameSink::write_value(Product p, std::size_t index, double value) {
  Lock lock;
  impl_->write_scalar(p, index, H5T_NATIVE_DOUBLE, &value);
}

void FrameSink::write_value(Product p, std::size_t index, std::int64_t value) {
  Lock lock;
  impl_->write_scalar(p, index, H5T_NATIVE_INT64, &value);
}

void FrameSink::write_row(Product id, std::size_t row, const double* values, std::size_t count) {
  Lock lock;
  Impl& m = *impl_;
  ProductInfo& p = m.get(id);
  if (p.image || p.cols == 0 || count != p.cols || row >= p.rows)
    fail_internal("FrameSink: write_row(" + std::to_string(row) + ", " + std::to_string(count) + " values) does not fit " +
                      p.name,
                  m.ctx(p.name));
  const hsize_t n = count;
  Hid ms = space_hid(H5Screate_simple(1, &n, nullptr));
  if (!ms) fail_hdf5(ErrorKind::output, "could not prepare the memory layout", m.ctx(p.name));
  m.write_table(id, row * p.cols, count, H5T_NATIVE_DOUBLE, values, ms.get());
}

void FrameSink::write_all(Product id, const double* values, std::size_t count) {
  Lock lock;
  Impl& m = *impl_;
  ProductInfo& p = m.get(id);
  const std::size_t total = p.rows * (p.cols ? p.cols : 1);
  if (p.image || count != total)
    fail_internal("FrameSink: write_all with " + std::to_string(count) + " values for " + p.name, m.ctx(p.name));
  if (H5Dwrite(p.dset.get(), H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT, values) < 0)
    fail_hdf5(ErrorKind::output, "could not write " + p.name, m.ctx(p.name));
}

void FrameSink::set_focus_distance(std::size_t frame, double metres) {
  Lock lock;
  impl_->write_scalar(impl_->focus_p, frame, H5T_NATIVE_DOUBLE, &metres);
}

void FrameSink::mark_done(std::size_t frame, std::int64_t source_index) {
  Lock lock;
  Impl& m = *impl_;
  if (frame >= m.n) fail_internal("FrameSink: frame " + std::to_string(frame) + " beyond " + std::to_string(m.n), m.ctx());
  // Uncompressed frames are at fixed offsets: the flag may follow the data
  // at once. Compressed chunks need their index flushed first (checkpoint).
  if (m.comp.method == Compression::none) m.write_done_flags(frame, source_index);
  else m.pending.emplace_back(frame, source_index);
  m.done[frame] = 1;
  while (m.done_prefix < m.n && m.done[m.done_prefix]) ++m.done_prefix;
}

std::size_t FrameSink::done_prefix() const noexcept { return impl_->done_prefix; }

std::vector<std::uint8_t> FrameSink::read_done() const {
  Lock lock;
  Impl& m = *impl_;
  std::vector<std::uint8_t> out(m.n, 0);
  if (H5Dread(m.products[m.done_p].dset.get(), H5T_NATIVE_UINT8, H5S_ALL, H5S_ALL, H5P_DEFAULT, out.data()) < 0)
    fail_hdf5(ErrorKind::output, "could not read /frames/done", m.ctx(done_name));
  return out;
}

void FrameSink::checkpoint() {
  Lock lock;
  impl_->checkpoint();
}

void FrameSink::finish() {
  Lock lock;
  Impl& m = *impl_;
  if (m.finished) return;
  const ErrorContext c = where(m.final_path);
  if (m.file) { // a second finish() after a failed rename only retries the rename
    m.checkpoint();
    m.tables.clear();
    m.products.clear();
    m.one_space.reset();
    m.complex_mem.reset();
    m.complex_file.reset();
    const bool flushed = H5Fflush(m.file.get(), H5F_SCOPE_GLOBAL) >= 0;
    const bool closed = m.file.close();
    if (!flushed || !closed)
      fail_hdf5(ErrorKind::output, "could not finish writing the output file '" + m.partial + "'", c);
  }
  std::error_code ec;
  fs::rename(m.partial, m.final_path, ec);
  if (ec)
    fail_output("the finished output could not be renamed from '" + m.partial + "' to its final name: " +
                    ec.message() + "; the complete result is in the .partial file",
                c);
  m.finished = true;
}

bool FrameSink::finished() const noexcept { return impl_->finished; }
std::size_t FrameSink::frames() const noexcept { return impl_->n; }
const std::string& FrameSink::final_path() const noexcept { return impl_->final_path; }
const std::string& FrameSink::partial_file() const noexcept { return impl_->partial; }
CompressionOptions FrameSink::compression() const noexcept { return impl_->comp; }

} // namespace wavestack::io
