#include "wavestack/io/stack_writer.hpp"

#include "hdf5_util.hpp"

#include <sys/stat.h>

#include <cstdint>

namespace wavestack::io {

using namespace detail;

namespace {
hid_t file_type(DType t) {
  switch (t) {
  case DType::u8: return H5T_STD_U8LE;
  case DType::i8: return H5T_STD_I8LE;
  case DType::u16: return H5T_STD_U16LE;
  case DType::i16: return H5T_STD_I16LE;
  case DType::u32: return H5T_STD_U32LE;
  case DType::i32: return H5T_STD_I32LE;
  case DType::u64: return H5T_STD_U64LE;
  case DType::i64: return H5T_STD_I64LE;
  case DType::f32: return H5T_IEEE_F32LE;
  case DType::f64: return H5T_IEEE_F64LE;
  }
  return H5T_IEEE_F32LE;
}

template <class T> hid_t memory_type();
template <> hid_t memory_type<std::uint8_t>() { return H5T_NATIVE_UINT8; }
template <> hid_t memory_type<std::uint16_t>() { return H5T_NATIVE_UINT16; }
template <> hid_t memory_type<std::int16_t>() { return H5T_NATIVE_INT16; }
template <> hid_t memory_type<std::uint32_t>() { return H5T_NATIVE_UINT32; }
template <> hid_t memory_type<std::int32_t>() { return H5T_NATIVE_INT32; }
template <> hid_t memory_type<float>() { return H5T_NATIVE_FLOAT; }
template <> hid_t memory_type<double>() { return H5T_NATIVE_DOUBLE; }
} // namespace

struct StackWriter::Impl {
  std::string path, dataset;
  Hid file, dset, file_space, mem_space;
  std::size_t mem_stride = 0; ///< row stride mem_space was made for
  std::size_t n = 0, h = 0, w = 0;
  bool single = false;
  ErrorContext ctx() const { return where(path, dataset); }
};

StackWriter::StackWriter(const std::string& path, const std::string& dataset, DType type, std::size_t frames,
                         std::size_t height, std::size_t width, StackOptions options) {
  Lock lock;
  auto m = std::make_unique<Impl>();
  m->path = path;
  m->dataset = absolute_path(dataset);
  m->n = frames;
  m->h = height;
  m->w = width;
  m->single = options.single_frame;
  const ErrorContext c = m->ctx();
  if (frames == 0 || height == 0 || width == 0) fail_internal("StackWriter: empty stack", c);
  if (m->single && frames != 1) fail_internal("StackWriter: a single-frame dataset holds exactly one frame", c);
  if (options.deflate_level < 0 || options.deflate_level > 9) fail_internal("StackWriter: deflate level 0-9", c);

  Hid fapl = file_access();
  struct stat st {};
  if (options.append && ::stat(path.c_str(), &st) == 0) {
    m->file = file_hid(H5Fopen(path.c_str(), H5F_ACC_RDWR, fapl.get()));
    if (!m->file) fail_hdf5(ErrorKind::output, "cannot open the file for adding a dataset", c);
  } else {
    m->file = file_hid(H5Fcreate(path.c_str(), H5F_ACC_TRUNC, H5P_DEFAULT, fapl.get()));
    if (!m->file) fail_hdf5(ErrorKind::output, "cannot create the file", c);
  }
  create_parent_groups(m->file.get(), m->dataset, ErrorKind::output, c);
  const hsize_t dims3[3] = {frames, height, width};
  const hsize_t* dims = m->single ? dims3 + 1 : dims3;
  const int rank = m->single ? 2 : 3;
  Hid space = space_hid(H5Screate_simple(rank, dims, nullptr));
  Hid dcpl = plist_hid(H5Pcreate(H5P_DATASET_CREATE));
  const hsize_t chunk3[3] = {1, height, width};
  if (!space || !dcpl || H5Pset_chunk(dcpl.get(), rank, m->single ? chunk3 + 1 : chunk3) < 0)
    fail_hdf5(ErrorKind::output, "cannot prepare the dataset", c);
  if (options.deflate_level > 0 &&
      (H5Pset_shuffle(dcpl.get()) < 0 || H5Pset_deflate(dcpl.get(), static_cast<unsigned>(options.deflate_level)) < 0))
    fail_hdf5(ErrorKind::output, "cannot set up compression", c);
  m->dset = dataset_hid(
      H5Dcreate2(m->file.get(), m->dataset.c_str(), file_type(type), space.get(), H5P_DEFAULT, dcpl.get(), H5P_DEFAULT));
  if (!m->dset) fail_hdf5(ErrorKind::output, "cannot create the dataset", c);
  m->file_space = space_hid(H5Dget_space(m->dset.get()));
  if (!m->file_space) fail_hdf5(ErrorKind::output, "cannot read the dataspace", c);
  impl_ = std::move(m);
}

StackWriter::StackWriter(StackWriter&&) noexcept = default;
StackWriter& StackWriter::operator=(StackWriter&& o) noexcept {
  if (this != &o) {
    Lock lock;
    impl_ = std::move(o.impl_);
  }
  return *this;
}
StackWriter::~StackWriter() {
  if (!impl_) return;
  Lock lock;
  impl_.reset();
}

template <class T> void StackWriter::write(std::size_t frame, ImageView<const T> data) {
  Lock lock;
  if (!impl_) fail_internal("StackWriter: write after close");
  Impl& m = *impl_;
  ErrorContext c = m.ctx();
  c.frame = static_cast<std::int64_t>(frame);
  if (frame >= m.n || data.height() != m.h || data.width() != m.w)
    fail_internal("StackWriter: frame " + std::to_string(frame) + " of " + std::to_string(data.height()) + "x" +
                      std::to_string(data.width()) + " does not fit the dataset",
                  c);
  if (!m.mem_space || m.mem_stride != data.stride()) {
    const hsize_t mdims[2] = {m.h, data.stride()}, mstart[2] = {0, 0}, mcount[2] = {m.h, m.w};
    Hid ms = space_hid(H5Screate_simple(2, mdims, nullptr));
    if (!ms || H5Sselect_hyperslab(ms.get(), H5S_SELECT_SET, mstart, nullptr, mcount, nullptr) < 0)
      fail_hdf5(ErrorKind::output, "cannot prepare the memory layout", c);
    m.mem_space = std::move(ms);
    m.mem_stride = data.stride();
  }
  const hsize_t start[3] = {frame, 0, 0}, count[3] = {1, m.h, m.w};
  if (H5Sselect_hyperslab(m.file_space.get(), H5S_SELECT_SET, m.single ? start + 1 : start, nullptr,
                          m.single ? count + 1 : count, nullptr) < 0 ||
      H5Dwrite(m.dset.get(), memory_type<T>(), m.mem_space.get(), m.file_space.get(), H5P_DEFAULT, data.data()) < 0)
    fail_hdf5(ErrorKind::output, "cannot write the frame", c);
}

template void StackWriter::write<std::uint8_t>(std::size_t, ImageView<const std::uint8_t>);
template void StackWriter::write<std::uint16_t>(std::size_t, ImageView<const std::uint16_t>);
template void StackWriter::write<std::int16_t>(std::size_t, ImageView<const std::int16_t>);
template void StackWriter::write<std::uint32_t>(std::size_t, ImageView<const std::uint32_t>);
template void StackWriter::write<std::int32_t>(std::size_t, ImageView<const std::int32_t>);
template void StackWriter::write<float>(std::size_t, ImageView<const float>);
template void StackWriter::write<double>(std::size_t, ImageView<const double>);

void StackWriter::set_attribute(const std::string& name, const AttributeValue& value) {
  Lock lock;
  if (!impl_) fail_internal("StackWriter: attribute after close");
  write_attribute(impl_->dset.get(), name, value, ErrorKind::output, impl_->ctx());
}

void StackWriter::set_file_attribute(const std::string& name, const AttributeValue& value) {
  Lock lock;
  if (!impl_) fail_internal("StackWriter: attribute after close");
  write_attribute(impl_->file.get(), name, value, ErrorKind::output, impl_->ctx());
}

void StackWriter::close() {
  Lock lock;
  if (!impl_) return;
  const ErrorContext c = impl_->ctx();
  impl_->mem_space.reset();
  impl_->file_space.reset();
  impl_->dset.reset();
  const bool ok = impl_->file.close();
  impl_.reset();
  if (!ok) fail_hdf5(ErrorKind::output, "could not finish writing the file", c);
}

} // namespace wavestack::io
