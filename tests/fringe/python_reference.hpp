#pragma once
// Helpers for the checks against numpy/scipy: arrays go to and from the
// checked-in script tests/fringe/reference_filters.py as raw little-endian
// float64 files in the build tree, and the script runs under /usr/bin/python3
// (the Debian python that has numpy and scipy).
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <string>
#include <vector>

#include <unistd.h>

namespace fringe_test {

inline std::string temp_path(const std::string& name) {
  const std::filesystem::path dir = std::filesystem::path(WAVESTACK_BINARY_DIR) / "test-tmp";
  std::filesystem::create_directories(dir);
  return (dir / ("fringe_" + name + "_" + std::to_string(::getpid()) + ".bin")).string();
}

inline void write_f64(const std::string& path, const std::vector<double>& v) {
  std::ofstream f(path, std::ios::binary);
  f.write(reinterpret_cast<const char*>(v.data()), static_cast<std::streamsize>(v.size() * sizeof(double)));
}

/// Reads exactly n doubles; returns an empty vector when the file is shorter.
inline std::vector<double> read_f64(const std::string& path, std::size_t n) {
  std::vector<double> v(n);
  std::ifstream f(path, std::ios::binary);
  f.read(reinterpret_cast<char*>(v.data()), static_cast<std::streamsize>(n * sizeof(double)));
  if (static_cast<std::size_t>(f.gcount()) != n * sizeof(double)) v.clear();
  return v;
}

/// Run the reference script with `args`; returns the exit status (0 = ok).
inline int run_reference(const std::string& args) {
  const std::string cmd = "/usr/bin/python3 '" WAVESTACK_SOURCE_DIR
                          "/tests/fringe/reference_filters.py' " + args + " > /dev/null";
  return std::system(cmd.c_str());
}

inline std::string quoted(const std::string& s) { return "'" + s + "'"; }

} // namespace fringe_test
