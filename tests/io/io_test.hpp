#pragma once
// Helpers for the io tests: a fresh scratch folder per test in the build
// tree, and running the checked-in h5py scripts of tests/io under
// /usr/bin/python3 (the Debian python that has numpy and h5py; the first
// python3 on PATH may not).
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <sstream>
#include <stdexcept>
#include <string>

#include <sys/wait.h>
#include <unistd.h>

namespace io_test {

/// An empty folder <build>/test-tmp/io_<name>_<pid>/, removed by the destructor.
struct TempDir {
  std::filesystem::path path;
  explicit TempDir(const std::string& name) {
    path = std::filesystem::path(WAVESTACK_BINARY_DIR) / "test-tmp" /
           ("io_" + name + "_" + std::to_string(::getpid()));
    std::filesystem::remove_all(path);
    std::filesystem::create_directories(path);
  }
  ~TempDir() {
    std::error_code ec;
    std::filesystem::permissions(path, std::filesystem::perms::owner_all, ec);
    std::filesystem::remove_all(path, ec);
  }
  std::string operator/(const std::string& file) const { return (path / file).string(); }
};

inline std::string quoted(const std::string& s) { return "'" + s + "'"; }

/// Run tests/io/<script> with `args` (already quoted). Returns the exit
/// status; the script's output is printed when it is not 0.
inline int run_python(const std::string& script, const std::string& args) {
  const std::string log = std::filesystem::path(WAVESTACK_BINARY_DIR) / "test-tmp" /
                          ("io_python_" + std::to_string(::getpid()) + ".log");
  const std::string cmd = "/usr/bin/python3 '" WAVESTACK_SOURCE_DIR "/tests/io/" + script + "' " + args + " > " +
                          quoted(log) + " 2>&1";
  const int raw = std::system(cmd.c_str());
  const int status = WIFEXITED(raw) ? WEXITSTATUS(raw) : 128;
  if (status != 0) {
    std::ifstream f(log);
    std::stringstream ss;
    ss << f.rdbuf();
    std::cerr << "---- " << script << " exited with " << status << ":\n" << ss.str() << "----\n";
  }
  std::error_code ec;
  std::filesystem::remove(log, ec);
  return status;
}

/// The input files of make_inputs.py, written once per test process into
/// one folder (shared by the frame-source tests). Throws when the script fails.
inline const TempDir& generated_inputs() {
  static TempDir dir("inputs");
  static const int status = run_python("make_inputs.py", quoted(dir.path.string()));
  if (status != 0) throw std::runtime_error("tests/io/make_inputs.py failed (output above)");
  return dir;
}

} // namespace io_test
