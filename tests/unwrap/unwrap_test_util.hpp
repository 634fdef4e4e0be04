#pragma once
// Shared helpers for tests/unwrap and bench_unwrap_*: synthetic (invented)
// phase surfaces, wrapping, comparisons up to a constant, raw file I/O and
// the runner for the scikit-image/numpy reference script (/usr/bin/python3,
// Debian's interpreter with numpy and scikit-image; the first python3 on
// PATH may not have them).
#include "wavestack/core/image.hpp"
#include "wavestack/unwrap/wrap.hpp"

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <random>
#include <string>
#include <vector>

#include <unistd.h>

namespace unwrap_test {

using wavestack::Image;
using wavestack::ImageView;

/// A smooth invented test surface in radians on an h×w grid: tilt +
/// paraboloid + Gaussian bumps, scaled so its peak-to-valley is about `pv`.
inline Image<float> synthetic_surface(std::size_t h, std::size_t w, double pv) {
  Image<double> s(h, w);
  double lo = 1e300, hi = -1e300;
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) {
      const double u = (x + 0.5) / w - 0.5, v = (y + 0.5) / h - 0.5; // [-0.5, 0.5)
      double f = 0.9 * u - 0.4 * v;                                      // tilt
      f += 1.6 * (u * u + 0.7 * v * v);                                  // paraboloid
      f += 0.8 * std::exp(-((u + 0.18) * (u + 0.18) + (v - 0.12) * (v - 0.12)) / (2 * 0.07 * 0.07));
      f -= 0.5 * std::exp(-((u - 0.2) * (u - 0.2) + (v + 0.15) * (v + 0.15)) / (2 * 0.05 * 0.05));
      f += 0.3 * std::exp(-((u - 0.05) * (u - 0.05) + (v - 0.3) * (v - 0.3)) / (2 * 0.1 * 0.1));
      s(y, x) = f;
      lo = std::min(lo, f);
      hi = std::max(hi, f);
    }
  Image<float> out(h, w);
  for (std::size_t i = 0; i < s.size(); ++i) out.data()[i] = static_cast<float>((s.data()[i] - lo) / (hi - lo) * pv);
  return out;
}

/// Largest |φ[y,x+1] − φ[y,x]| or |φ[y+1,x] − φ[y,x]|: below π the wrapped
/// differences are the true ones (the surface is sampled finely enough).
inline double max_step(const Image<float>& img) {
  double m = 0;
  for (std::size_t y = 0; y < img.height(); ++y)
    for (std::size_t x = 0; x < img.width(); ++x) {
      if (x + 1 < img.width()) m = std::max(m, std::abs(double(img(y, x + 1)) - double(img(y, x))));
      if (y + 1 < img.height()) m = std::max(m, std::abs(double(img(y + 1, x)) - double(img(y, x))));
    }
  return m;
}

/// Add zero-mean Gaussian noise of standard deviation `sigma` (radians).
inline void add_noise(Image<float>& img, double sigma, unsigned seed) {
  std::mt19937 rng(seed);
  std::normal_distribution<float> g(0.f, static_cast<float>(sigma));
  for (auto& v : img) v += g(rng);
}

/// Wrap every pixel to [−π, π) (angle of exp(iφ), computed in double).
inline Image<float> wrapped(const Image<float>& img) {
  Image<float> out(img.height(), img.width());
  for (std::size_t i = 0; i < img.size(); ++i) {
    const double v = img.data()[i];
    out.data()[i] = static_cast<float>(std::atan2(std::sin(v), std::cos(v)));
    if (out.data()[i] >= wavestack::unwrap::pi_f) out.data()[i] = -wavestack::unwrap::pi_f;
  }
  return out;
}

/// Result of comparing a with b up to one constant: the constant is the
/// median of (a − b) over the pixels used; counts pixels within `tol`.
struct Agreement {
  double offset = 0;      ///< median of a − b
  double max_error = 0;   ///< max |a − b − offset| over the pixels used
  double rms_error = 0;   ///< RMS of a − b − offset
  double cycles = 0;      ///< offset / 2π
  std::size_t pixels = 0; ///< pixels used
  std::size_t within = 0; ///< pixels with |a − b − offset| <= tol
  double fraction() const { return pixels ? double(within) / double(pixels) : 0.0; }
};

inline Agreement compare_up_to_constant(ImageView<const float> a, ImageView<const float> b, double tol,
                                        const std::vector<std::uint8_t>* use = nullptr) {
  std::vector<double> d;
  d.reserve(a.height() * a.width());
  for (std::size_t y = 0; y < a.height(); ++y)
    for (std::size_t x = 0; x < a.width(); ++x)
      if (!use || (*use)[y * a.width() + x]) d.push_back(double(a(y, x)) - double(b(y, x)));
  Agreement r;
  r.pixels = d.size();
  if (d.empty()) return r;
  std::vector<double> s = d;
  std::nth_element(s.begin(), s.begin() + s.size() / 2, s.end());
  r.offset = s[s.size() / 2];
  r.cycles = r.offset / wavestack::unwrap::two_pi;
  double sq = 0;
  for (double v : d) {
    const double e = std::abs(v - r.offset);
    r.max_error = std::max(r.max_error, e);
    sq += e * e;
    if (e <= tol) ++r.within;
  }
  r.rms_error = std::sqrt(sq / double(d.size()));
  return r;
}

/// A file name unique to this process and `name`, in <build>/test-tmp/ when
/// built inside the project, else the system temp folder.
inline std::string temp_path(const std::string& name) {
#ifdef WAVESTACK_BINARY_DIR
  const std::filesystem::path dir = std::filesystem::path(WAVESTACK_BINARY_DIR) / "test-tmp";
#else
  const std::filesystem::path dir = std::filesystem::temp_directory_path();
#endif
  std::filesystem::create_directories(dir);
  return (dir / ("unwrap_" + name + "_" + std::to_string(::getpid()) + ".bin")).string();
}

template <class T> void write_raw(const std::string& path, ImageView<const T> v) {
  std::ofstream f(path, std::ios::binary);
  for (std::size_t y = 0; y < v.height(); ++y)
    f.write(reinterpret_cast<const char*>(v.row(y)), static_cast<std::streamsize>(v.width() * sizeof(T)));
}

/// Reads exactly h×w values; returns an empty image when the file is shorter.
template <class T> Image<T> read_raw(const std::string& path, std::size_t h, std::size_t w) {
  Image<T> img(h, w);
  std::ifstream f(path, std::ios::binary);
  f.read(reinterpret_cast<char*>(img.data()), static_cast<std::streamsize>(img.size() * sizeof(T)));
  if (static_cast<std::size_t>(f.gcount()) != img.size() * sizeof(T)) return Image<T>();
  return img;
}

/// Removes the listed files when it goes out of scope.
struct TempFiles {
  std::vector<std::string> paths;
  ~TempFiles() {
    std::error_code ec;
    for (const auto& p : paths) std::filesystem::remove(p, ec);
  }
};

/// Run the Python script `script` with `args` through /usr/bin/python3;
/// returns the exit status (0 = ok). stdout goes to /dev/null.
inline int run_python(const std::string& script, const std::string& args) {
  const std::string cmd = "/usr/bin/python3 '" + script + "' " + args + " > /dev/null";
  return std::system(cmd.c_str());
}

inline std::string quoted(const std::string& s) { return "'" + s + "'"; }

} // namespace unwrap_test
