#pragma once
// Helpers for the quantify tests: invented test objects and the bridge to
// the checked-in reference script tests/quantify/reference_objects.py (run
// with /usr/bin/python3: Debian's python with numpy, scipy, scikit-image).
#include "wavestack/core/image.hpp"

#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <random>
#include <string>
#include <vector>

#include <unistd.h>

namespace quantify_test {

using wavestack::Image;

inline std::string temp_path(const std::string& name) {
  const std::filesystem::path dir = std::filesystem::path(WAVESTACK_BINARY_DIR) / "test-tmp";
  std::filesystem::create_directories(dir);
  return (dir / ("quantify_" + name + "_" + std::to_string(::getpid()) + ".bin")).string();
}

template <class T> void write_raw(const std::string& path, const Image<T>& img) {
  std::ofstream f(path, std::ios::binary);
  f.write(reinterpret_cast<const char*>(img.data()), static_cast<std::streamsize>(img.size() * sizeof(T)));
}

/// Reads exactly h*w values; false when the file is shorter.
template <class T> bool read_raw(const std::string& path, Image<T>& img) {
  std::ifstream f(path, std::ios::binary);
  f.read(reinterpret_cast<char*>(img.data()), static_cast<std::streamsize>(img.size() * sizeof(T)));
  return static_cast<std::size_t>(f.gcount()) == img.size() * sizeof(T);
}

/// Run reference_objects.py `cmd` on `in`; the result lands in `out`
/// (sized by the caller). False when the script failed.
template <class In, class Out>
bool run_reference(const std::string& cmd, const Image<In>& in, Image<Out>& out, const std::string& extra = "") {
  const std::string a = temp_path(cmd + "_in"), b = temp_path(cmd + "_out");
  write_raw(a, in);
  const std::string line = "/usr/bin/python3 '" WAVESTACK_SOURCE_DIR "/tests/quantify/reference_objects.py' " + cmd +
                           " '" + a + "' '" + b + "' " + std::to_string(in.height()) + " " +
                           std::to_string(in.width()) + " " + extra + " > /dev/null";
  bool ok = std::system(line.c_str()) == 0 && read_raw(b, out);
  std::filesystem::remove(a);
  std::filesystem::remove(b);
  return ok;
}

/// Add white Gaussian noise (fixed seed).
inline void add_noise(Image<float>& img, double sigma, unsigned seed) {
  std::mt19937 rng(seed);
  std::normal_distribution<double> n(0.0, sigma);
  for (float& v : img) v = static_cast<float>(v + n(rng));
}

/// Homogeneous ellipsoid in the projection approximation (invented test
/// object): thickness 2c·sqrt(1 − (dx/a)² − (dy/b)²), OPD = Δn·thickness.
struct Ellipsoid {
  double col, row;  ///< centre, pixels
  double a, b, c;   ///< semi-axes: a along columns, b along rows, c along z (µm)
  double dn;        ///< index difference to the medium
  double volume_um3() const { return 4.0 / 3.0 * M_PI * a * b * c; }
  double peak_opd_nm() const { return dn * 2 * c * 1e3; }
};

/// OPD map (nm) of ellipsoids on a grid of pitch `pitch_um`, sampled at pixel centres.
inline Image<float> ellipsoid_opd(std::size_t h, std::size_t w, double pitch_um, const std::vector<Ellipsoid>& es) {
  Image<float> img(h, w, 0.0f);
  for (std::size_t r = 0; r < h; ++r)
    for (std::size_t c = 0; c < w; ++c) {
      double v = 0;
      for (const Ellipsoid& e : es) {
        const double u = (static_cast<double>(c) - e.col) * pitch_um / e.a;
        const double t = (static_cast<double>(r) - e.row) * pitch_um / e.b;
        const double q = 1 - u * u - t * t;
        if (q > 0) v += e.dn * 2 * e.c * 1e3 * std::sqrt(q);
      }
      img(r, c) = static_cast<float>(v);
    }
  return img;
}

} // namespace quantify_test
