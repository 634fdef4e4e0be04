#pragma once
// Helpers for the checks against numpy.fft: arrays go to and from the
// checked-in script tests/fft/reference_fft.py as raw little-endian files in
// the build tree (test-tmp/), and the script runs under /usr/bin/python3 (the
// Debian python that has numpy; the first python3 on PATH may not).
#include <complex>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <string>
#include <vector>

#include <unistd.h>

namespace fft_test {

/// A file name unique to this process and `name`, in <build>/test-tmp/.
inline std::string temp_path(const std::string& name) {
  const std::filesystem::path dir = std::filesystem::path(WAVESTACK_BINARY_DIR) / "test-tmp";
  std::filesystem::create_directories(dir);
  return (dir / ("fft_" + name + "_" + std::to_string(::getpid()) + ".bin")).string();
}

template <class T> void write_raw(const std::string& path, const T* data, std::size_t n) {
  std::ofstream f(path, std::ios::binary);
  f.write(reinterpret_cast<const char*>(data), static_cast<std::streamsize>(n * sizeof(T)));
}

/// Reads exactly n values; returns an empty vector when the file is shorter.
template <class T> std::vector<T> read_raw(const std::string& path, std::size_t n) {
  std::vector<T> v(n);
  std::ifstream f(path, std::ios::binary);
  f.read(reinterpret_cast<char*>(v.data()), static_cast<std::streamsize>(n * sizeof(T)));
  if (static_cast<std::size_t>(f.gcount()) != n * sizeof(T)) v.clear();
  return v;
}

/// Run tests/fft/reference_fft.py with `args`; returns the exit status (0 = ok).
inline int run_reference(const std::string& args) {
  const std::string cmd = "/usr/bin/python3 '" WAVESTACK_SOURCE_DIR "/tests/fft/reference_fft.py' " + args +
                          " > /dev/null";
  return std::system(cmd.c_str());
}

inline std::string shell_quoted(const std::string& s) { return "'" + s + "'"; }

/// Removes the listed files when it goes out of scope.
struct TempFiles {
  std::vector<std::string> paths;
  ~TempFiles() {
    std::error_code ec;
    for (const auto& p : paths) std::filesystem::remove(p, ec);
  }
};

} // namespace fft_test
