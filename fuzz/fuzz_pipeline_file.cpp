// Fuzz target: the pipeline-file loader (pipeline/config.hpp), the --set
// override parser and the frame-range parser behind [input] frames.
//
// Input: the text of a pipeline file. Leading lines "#--set KEY=VALUE" are
// also applied as --set overrides, and "#--frames TEXT" lines are parsed as
// frame ranges and selected from 64 frames (both are TOML comments, so the
// text still parses). Expected outcome for bad text: a wavestack::Error of a
// user-facing kind. A finding: a crash, a sanitizer report, an Error of kind
// internal, or any other exception escaping the loader.
#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/pipeline/config.hpp"

#include <algorithm>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <string>
#include <vector>

namespace fs = std::filesystem;
using namespace wavestack;

namespace {

// The folder paths resolve against: a scratch copy of datasets-demo/ next to
// calibration/ with the demo profile, so the seeds' profile reference works
// and a fuzzed path can only reach these few small files.
std::string g_folder;

void remove_scratch() {
  std::error_code ec;
  if (!g_folder.empty()) fs::remove_all(fs::path(g_folder).parent_path(), ec);
}

[[noreturn]] void finding(const char* what, const std::string& detail) {
  std::fprintf(stderr, "fuzz_pipeline_file: %s: %s\n", what, detail.c_str());
  std::abort();
}

void expected(const Error& e) {
  if (e.kind() == ErrorKind::internal) finding("internal error", e.what());
}

// A frame range on its own, as `--frames` and [input] frames parse it.
void check_frames(const std::string& text) {
  try {
    const pipeline::FrameRange r = pipeline::FrameRange::parse(text);
    (void)r.select(64);
    (void)r.str();
  } catch (const Error& e) {
    expected(e);
  }
}

} // namespace

extern "C" int LLVMFuzzerInitialize(int*, char***) {
  log::set_level(log::Level::quiet);
  std::string tmpl = (fs::temp_directory_path() / "wavestack-fuzz-XXXXXX").string();
  if (!::mkdtemp(tmpl.data())) finding("set-up", "cannot create a scratch folder");
  const fs::path root = tmpl;
  fs::create_directories(root / "datasets-demo");
  fs::create_directories(root / "calibration");
  fs::copy_file(WAVESTACK_DEMO_PROFILE, root / "calibration" / "demo-40x-0.75na.toml");
  g_folder = (root / "datasets-demo").string();
  std::atexit(remove_scratch);
  return 0;
}

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string text(reinterpret_cast<const char*>(data), size);
  std::vector<pipeline::Override> overrides;
  try {
    // "#--set " and "#--frames " lines at the top.
    std::size_t pos = 0;
    while (text.compare(pos, 3, "#--") == 0) {
      const std::size_t end = std::min(text.find('\n', pos), text.size());
      const std::string line = text.substr(pos, end - pos);
      if (line.starts_with("#--set ")) overrides.push_back(pipeline::Override::parse(line.substr(7)));
      else if (line.starts_with("#--frames ")) check_frames(line.substr(10));
      pos = std::min(end + 1, text.size());
    }
    pipeline::Pipeline pl = pipeline::load_pipeline_text(text, "fuzz.toml", g_folder, overrides);
    // What `check` and the output file's attributes do with a loaded pipeline.
    (void)pl.text();
    (void)pl.input.frames.str();
    (void)pl.input.frames.select(64);
  } catch (const Error& e) {
    expected(e);
  } catch (const std::exception& e) {
    finding("exception other than wavestack::Error", e.what());
  }
  log::clear_warnings();
  return 0;
}
