#pragma once
// Shared helpers for tests/propagate: band-limited random fields, norms, and
// the runner for the numpy reference script (/usr/bin/python3, the Debian
// python that has numpy; the first python3 on PATH may not).
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/fft/fft.hpp"

#include <cmath>
#include <cstdio>
#include <complex>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <functional>
#include <random>
#include <string>
#include <vector>

#include <unistd.h>

namespace propagate_test {

using wavestack::cfloat;
using wavestack::Image;
using wavestack::ImageView;

/// A random complex field whose spectrum is non-zero only where
/// keep(fy, fx) is true (frequencies in cycles/m on the h×w grid itself, so
/// the field is exactly band-limited as a periodic h×w signal).
inline Image<cfloat> random_band_limited(std::size_t h, std::size_t w, double dy, double dx, unsigned seed,
                                         const std::function<bool(double, double)>& keep) {
  std::mt19937 rng(seed);
  std::normal_distribution<float> g(0.f, 1.f);
  Image<cfloat> spec(h, w), field(h, w);
  for (std::size_t ky = 0; ky < h; ++ky)
    for (std::size_t kx = 0; kx < w; ++kx) {
      const cfloat v(g(rng), g(rng));
      spec(ky, kx) = keep(wavestack::fft::bin_frequency(ky, h, dy), wavestack::fft::bin_frequency(kx, w, dx))
                         ? v
                         : cfloat(0, 0);
    }
  wavestack::fft::plan_c2c(h, w, wavestack::fft::Direction::backward)->execute(spec.data(), field.data());
  const float s = 1.0f / std::sqrt(static_cast<float>(h * w));
  for (auto& v : field) v *= s;
  return field;
}

/// Energy sum |u|^2 in double.
inline double energy(ImageView<const cfloat> u) {
  double e = 0;
  for (std::size_t y = 0; y < u.height(); ++y)
    for (std::size_t x = 0; x < u.width(); ++x) e += std::norm(std::complex<double>(u(y, x)));
  return e;
}

/// ||a - b|| / ||b|| over the whole array, in double.
inline double rel_rms(ImageView<const cfloat> a, ImageView<const cfloat> b) {
  double num = 0, den = 0;
  for (std::size_t y = 0; y < b.height(); ++y)
    for (std::size_t x = 0; x < b.width(); ++x) {
      num += std::norm(std::complex<double>(a(y, x)) - std::complex<double>(b(y, x)));
      den += std::norm(std::complex<double>(b(y, x)));
    }
  return std::sqrt(num / den);
}

/// A file name unique to this process and `name`, in <build>/test-tmp/.
inline std::string temp_path(const std::string& name) {
  const std::filesystem::path dir = std::filesystem::path(WAVESTACK_BINARY_DIR) / "test-tmp";
  std::filesystem::create_directories(dir);
  return (dir / ("propagate_" + name + "_" + std::to_string(::getpid()) + ".bin")).string();
}

template <class T> void write_raw(const std::string& path, const std::vector<T>& v) {
  std::ofstream f(path, std::ios::binary);
  f.write(reinterpret_cast<const char*>(v.data()), static_cast<std::streamsize>(v.size() * sizeof(T)));
}

/// Reads exactly n values; returns an empty vector when the file is shorter.
template <class T> std::vector<T> read_raw(const std::string& path, std::size_t n) {
  std::vector<T> v(n);
  std::ifstream f(path, std::ios::binary);
  f.read(reinterpret_cast<char*>(v.data()), static_cast<std::streamsize>(n * sizeof(T)));
  if (static_cast<std::size_t>(f.gcount()) != n * sizeof(T)) v.clear();
  return v;
}

/// Run tests/propagate/reference_propagation.py with `args`; 0 = ok.
inline int run_reference(const std::string& args) {
  const std::string cmd = "/usr/bin/python3 '" WAVESTACK_SOURCE_DIR "/tests/propagate/reference_propagation.py' " +
                          args + " > /dev/null";
  return std::system(cmd.c_str());
}

inline std::string shell_quoted(const std::string& s) { return "'" + s + "'"; }

/// Run tests/propagate/reference_analytic.py (numpy + scipy) with `args`; 0 = ok.
inline int run_analytic(const std::string& args) {
  const std::string cmd = "/usr/bin/python3 '" WAVESTACK_SOURCE_DIR "/tests/propagate/reference_analytic.py' " +
                          args + " > /dev/null";
  return std::system(cmd.c_str());
}

/// A grid in object space (plane 0).
inline wavestack::Grid grid_of(double dy, double dx, double wavelength, double index = 1.0) {
  wavestack::Grid g;
  g.dy = dy;
  g.dx = dx;
  g.wavelength = wavelength;
  g.medium_index = index;
  return g;
}

/// %.17g, for passing doubles to the reference scripts.
inline std::string num17(double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.17g", v);
  return buf;
}

/// True when some recorded warning contains `text`; counts them in *n.
inline bool warned(const std::string& text, std::size_t* n = nullptr) {
  std::size_t c = 0;
  for (const auto& w : wavestack::log::warnings())
    if (w.find(text) != std::string::npos) ++c;
  if (n) *n = c;
  return c > 0;
}

/// Removes the listed files when it goes out of scope.
struct TempFiles {
  std::vector<std::string> paths;
  ~TempFiles() {
    std::error_code ec;
    for (const auto& p : paths) std::filesystem::remove(p, ec);
  }
};

} // namespace propagate_test
