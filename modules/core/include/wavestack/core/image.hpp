#pragma once
// Image<T>: a dense row-major 2-D array with 64-byte aligned storage (enough
// for every SIMD width and for FFTW's new-array execute, which needs the
// alignment the plan was made with). ImageView<T> is a non-owning window.
// Images know nothing about stages or files.
#include <complex>
#include <cstddef>
#include <cstdlib>
#include <cstring>
#include <memory>
#include <new>
#include <utility>

namespace wavestack {

using cfloat = std::complex<float>;
inline constexpr std::size_t image_alignment = 64;

template <class T> class ImageView {
public:
  ImageView() = default;
  ImageView(T* data, std::size_t height, std::size_t width, std::size_t stride)
      : data_(data), height_(height), width_(width), stride_(stride) {}

  std::size_t height() const noexcept { return height_; }
  std::size_t width() const noexcept { return width_; }
  std::size_t stride() const noexcept { return stride_; } ///< elements between rows
  T* data() const noexcept { return data_; }
  T* row(std::size_t y) const noexcept { return data_ + y * stride_; }
  T& operator()(std::size_t y, std::size_t x) const noexcept { return data_[y * stride_ + x]; }
  bool empty() const noexcept { return height_ == 0 || width_ == 0; }
  bool contiguous() const noexcept { return stride_ == width_; }

  /// Sub-window of rows [y0, y0+h) and columns [x0, x0+w); no bounds check.
  ImageView sub(std::size_t y0, std::size_t x0, std::size_t h, std::size_t w) const noexcept {
    return ImageView(data_ + y0 * stride_ + x0, h, w, stride_);
  }
  operator ImageView<const T>() const noexcept { return {data_, height_, width_, stride_}; }

private:
  T* data_ = nullptr;
  std::size_t height_ = 0, width_ = 0, stride_ = 0;
};

template <class T> class Image {
public:
  Image() = default;
  Image(std::size_t height, std::size_t width) { resize(height, width); }
  Image(std::size_t height, std::size_t width, const T& value) {
    resize(height, width);
    fill(value);
  }
  Image(const Image& o) { *this = o; }
  Image(Image&& o) noexcept { swap(o); }
  Image& operator=(const Image& o) {
    if (this != &o) {
      resize(o.height_, o.width_);
      if (size()) std::memcpy(static_cast<void*>(data_.get()), o.data_.get(), size() * sizeof(T));
    }
    return *this;
  }
  Image& operator=(Image&& o) noexcept {
    swap(o);
    return *this;
  }
  void swap(Image& o) noexcept {
    std::swap(data_, o.data_);
    std::swap(height_, o.height_);
    std::swap(width_, o.width_);
    std::swap(capacity_, o.capacity_);
  }

  /// Change the shape; reallocates only when the new size exceeds capacity, so
  /// a buffer sized at plan time never allocates again in steady state.
  /// Contents are unspecified after a resize.
  void resize(std::size_t height, std::size_t width) {
    const std::size_t n = height * width;
    if (n > capacity_) {
      const std::size_t bytes = ((n * sizeof(T) + image_alignment - 1) / image_alignment) * image_alignment;
      void* p = std::aligned_alloc(image_alignment, bytes);
      if (!p) throw std::bad_alloc();
      data_.reset(static_cast<T*>(p));
      capacity_ = n;
    }
    height_ = height;
    width_ = width;
  }
  void fill(const T& v) {
    for (std::size_t i = 0; i < size(); ++i) data_.get()[i] = v;
  }

  std::size_t height() const noexcept { return height_; }
  std::size_t width() const noexcept { return width_; }
  std::size_t size() const noexcept { return height_ * width_; }
  std::size_t stride() const noexcept { return width_; }
  bool empty() const noexcept { return size() == 0; }
  T* data() noexcept { return data_.get(); }
  const T* data() const noexcept { return data_.get(); }
  T* row(std::size_t y) noexcept { return data_.get() + y * width_; }
  const T* row(std::size_t y) const noexcept { return data_.get() + y * width_; }
  T& operator()(std::size_t y, std::size_t x) noexcept { return data_.get()[y * width_ + x]; }
  const T& operator()(std::size_t y, std::size_t x) const noexcept { return data_.get()[y * width_ + x]; }
  T* begin() noexcept { return data(); }
  T* end() noexcept { return data() + size(); }
  const T* begin() const noexcept { return data(); }
  const T* end() const noexcept { return data() + size(); }

  ImageView<T> view() noexcept { return {data(), height_, width_, width_}; }
  ImageView<const T> view() const noexcept { return {data(), height_, width_, width_}; }
  operator ImageView<T>() noexcept { return view(); }
  operator ImageView<const T>() const noexcept { return view(); }

private:
  struct Free {
    void operator()(T* p) const noexcept { std::free(p); }
  };
  std::unique_ptr<T, Free> data_;
  std::size_t height_ = 0, width_ = 0, capacity_ = 0;
};

} // namespace wavestack
