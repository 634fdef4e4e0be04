// Pipeline-file inputs that once crashed the loader or let a non-wavestack
// exception escape (found with fuzz/fuzz_pipeline_file; the same inputs are
// in fuzz/regressions/pipeline_file). Each must now be an Error(config)
// that names what is wrong.
#include "wavestack/core/error.hpp"
#include "error_of.hpp"
#include "wavestack/pipeline/config.hpp"

#include <catch2/catch.hpp>

#include <cstdint>
#include <limits>
#include <string>

using namespace wavestack;
using wavestack_test::error_of;
using namespace wavestack::pipeline;

TEST_CASE("a stage.N.key override where the stage array holds no tables is a config error") {
  const Error e = error_of([] { load_pipeline_text("stage = [1]\n", "p.toml", ".", {Override::parse("stage.1.x=1")}); });
  CHECK(e.kind() == ErrorKind::config);
  CHECK_THAT(e.message(), Catch::Contains("stage 1 is not a [[stage]] table"));
  CHECK(e.context().key == "--set stage.1.x");
}

TEST_CASE("frame ranges at the int64 limit are refused or stop at the end") {
  const std::string max = std::to_string(std::numeric_limits<std::int64_t>::max());
  CHECK(error_of([&] { FrameRange::parse(max); }).kind() == ErrorKind::config);
  // The largest single index that still has a stop.
  CHECK(FrameRange::parse(std::to_string(std::numeric_limits<std::int64_t>::max() - 1)).select(10).empty());
  // A step that would overflow the index after the first selected frame.
  CHECK(FrameRange::parse("63::" + max).select(64) == std::vector<std::int64_t>{63});
  CHECK(FrameRange::parse("0:64:" + max).select(64) == std::vector<std::int64_t>{0});
  CHECK(FrameRange::parse("1::3").select(8) == std::vector<std::int64_t>{1, 4, 7});
}

TEST_CASE("an instrument profile path the file system cannot take is a config error") {
  const std::string text = "[input]\npath = \"h.h5\"\n[instrument]\nprofile = \"" + std::string(300, 'x') + ".toml\"\n";
  const Error e = error_of([&] { load_pipeline_text(text, "p.toml", "."); });
  CHECK(e.kind() == ErrorKind::config);
  CHECK(e.context().key == "[instrument]: profile");
  CHECK_THAT(e.message(), Catch::Contains("cannot be read"));
  // A folder is not a profile.
  const Error d = error_of([] {
    load_pipeline_text("[input]\npath = \"h.h5\"\n[instrument]\nprofile = \".\"\n", "p.toml", ".");
  });
  CHECK_THAT(d.message(), Catch::Contains("is a folder"));
}
