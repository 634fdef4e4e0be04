#pragma once
// Helpers for the checks against numpy: arrays go to and from the checked-in
// script tests/sideband/reference_fft2.py as raw little-endian files in the
// build tree; the script runs under /usr/bin/python3 (Debian python with numpy).
#include <complex>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <string>
#include <vector>

#include <unistd.h>

namespace sideband_test {

inline std::string temp_path(const std::string& name) {
  const std::filesystem::path dir = std::filesystem::path(WAVESTACK_BINARY_DIR) / "test-tmp";
  std::filesystem::create_directories(dir);
  return (dir / ("sideband_" + name + "_" + std::to_string(::getpid()) + ".bin")).string();
}

inline void write_f64(const std::string& path, const std::vector<double>& v) {
  std::ofstream f(path, std::ios::binary);
  f.write(reinterpret_cast<const char*>(v.data()), static_cast<std::streamsize>(v.size() * sizeof(double)));
}

/// Reads exactly n complex128 values; empty when the file is shorter.
inline std::vector<std::complex<double>> read_c128(const std::string& path, std::size_t n) {
  std::vector<std::complex<double>> v(n);
  std::ifstream f(path, std::ios::binary);
  f.read(reinterpret_cast<char*>(v.data()), static_cast<std::streamsize>(n * sizeof(v[0])));
  if (static_cast<std::size_t>(f.gcount()) != n * sizeof(v[0])) v.clear();
  return v;
}

/// numpy.fft.fft2 of an h×w array through reference_fft2.py; empty on failure.
inline std::vector<std::complex<double>> numpy_fft2(const std::vector<double>& img, std::size_t h,
                                                    std::size_t w) {
  const auto in = temp_path("fft2_in"), out = temp_path("fft2_out");
  write_f64(in, img);
  const std::string cmd = "/usr/bin/python3 '" WAVESTACK_SOURCE_DIR "/tests/sideband/reference_fft2.py' '" +
                          in + "' '" + out + "' " + std::to_string(h) + " " + std::to_string(w) + " > /dev/null";
  std::vector<std::complex<double>> spec;
  if (std::system(cmd.c_str()) == 0) spec = read_c128(out, h * w);
  std::filesystem::remove(in);
  std::filesystem::remove(out);
  return spec;
}

} // namespace sideband_test
