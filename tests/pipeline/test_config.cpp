// Pipeline-file loading: a table of texts, the expected message, line and
// column (toml++ positions are 1-based). DESIGN.md "Pipeline file" contract.
#include "wavestack/core/error.hpp"
#include "wavestack/pipeline/config.hpp"

#include <catch2/catch.hpp>

using namespace wavestack;
using namespace wavestack::pipeline;

namespace {
const char* good = R"([input]
path = "holo.h5"
dataset = "/holograms"
frames = "2:10:2"

[instrument]
wavelength = "632.8 nm"
pixel_pitch = "3.45 um"
magnification = 40.0
numerical_aperture = 0.75
medium_index = 1.333

[[stage]]
type = "fringe"
[[stage]]
type = "sideband"
order = "+1"
[[stage]]
type = "propagate"
distance = "-12.5 um"

[output]
path = "out.h5"
products = ["phase", "opd"]
)";

struct Bad {
  std::string from, to; // replace `from` in the good text by `to`
  std::string message;  // words the message must contain
  int line, column;
};

Error load_error(const std::string& text) {
  try {
    load_pipeline_text(text, "p.toml", ".");
  } catch (const Error& e) {
    return e;
  }
  FAIL("no error for:\n" << text);
  throw;
}
} // namespace

TEST_CASE("a valid pipeline loads with every value in SI units") {
  Pipeline pl = load_pipeline_text(good, "p.toml", "/data");
  CHECK(pl.input.path == "/data/holo.h5");
  CHECK(pl.input.frames.start == 2);
  CHECK(pl.input.frames.stop == 10);
  CHECK(pl.input.frames.step == 2);
  CHECK(pl.instrument.wavelength == Approx(632.8e-9));
  CHECK(pl.instrument.object_pitch() == Approx(3.45e-6 / 40));
  CHECK(pl.stages.size() == 3);
  CHECK(pl.stages[2]->fixed_distance().value() == Approx(-12.5e-6));
  CHECK(pl.output.products == std::vector<std::string>{"phase", "opd"});
  CHECK(pl.output.path == "/data/out.h5");
}

TEST_CASE("pipeline errors name the key, line and column") {
  const Bad cases[] = {
      {"distance = \"-12.5 um\"", "distance = -12.5", "bare number", 20, 12},
      {"distance = \"-12.5 um\"", "distance = \"-12.5 furlong\"", "unknown length unit", 20, 12},
      {"order = \"+1\"", "order = \"+2\"", "expected one of \"auto\", \"+1\", \"-1\"", 17, 9},
      {"order = \"+1\"", "ordre = \"+1\"", "unknown key \"ordre\"", 17, 1},
      {"type = \"fringe\"", "type = \"fringes\"", "unknown stage type \"fringes\"", 14, 8},
      {"wavelength = \"632.8 nm\"\n", "", "wavelength: missing", 6, 1},
      {"wavelength = \"632.8 nm\"", "wavelength = \"632.8 m\"", "did you mean 632.8 nm", 7, 14},
      {"magnification = 40.0", "magnification = -4", "positive", 9, 17},
      {"products = [\"phase\", \"opd\"]", "products = [\"phase\", \"thickness\"]", "unknown product \"thickness\"", 24, 12},
      {"products = [\"phase\", \"opd\"]", "products = [\"phase\", \"height\"]", "needs height = \"transmission\"", 24, 12},
      {"frames = \"2:10:2\"", "frames = \"2-10\"", "frame range", 4, 10},
      {"[output]", "[outptu]", "unknown key \"outptu\"", 22, 2},
      {"dataset = \"/holograms\"", "dataset = \"/holograms\"\ncolour = 3", "unknown key \"colour\"", 4, 1},
  };
  for (const Bad& b : cases) {
    std::string text = good;
    auto pos = text.find(b.from);
    REQUIRE(pos != std::string::npos);
    text.replace(pos, b.from.size(), b.to);
    Error e = load_error(text);
    INFO(e.what());
    CHECK(e.exit_code() == 2);
    CHECK_THAT(std::string(e.what()), Catch::Contains(b.message));
    CHECK(e.context().file == "p.toml");
    CHECK(e.context().line == b.line);
    CHECK(e.context().column == b.column);
  }
}

TEST_CASE("invalid TOML reports the parser's position") {
  Error e = load_error("[input\npath = 1\n");
  CHECK(e.exit_code() == 2);
  CHECK(e.context().line == 1);
  CHECK_THAT(std::string(e.what()), Catch::Contains("not valid TOML"));
}

TEST_CASE("overrides (--set) change keys, including stage keys by number") {
  std::vector<Override> o = {Override::parse("output.path=other.h5"), Override::parse("stage.3.distance=5 um"),
                             Override::parse("instrument.magnification=20")};
  Pipeline pl = load_pipeline_text(good, "p.toml", "/d", o);
  CHECK(pl.output.path == "/d/other.h5");
  CHECK(pl.stages[2]->fixed_distance().value() == Approx(5e-6));
  CHECK(pl.instrument.magnification == 20.0);
  CHECK_THROWS_AS(Override::parse("nokey"), Error);
  CHECK_THROWS_AS(load_pipeline_text(good, "p.toml", ".", {Override::parse("stage.9.distance=1 um")}), Error);
}

TEST_CASE("the pipeline prints back as TOML that loads to the same pipeline") {
  // STYLE.md: parse(print(p)) == p
  Pipeline a = load_pipeline_text(good, "p.toml", ".");
  Pipeline b = load_pipeline_text(a.text(), "printed.toml", ".");
  CHECK(a.table == b.table);
  CHECK(a.text() == b.text());
}

TEST_CASE("frame ranges follow start:stop:step") {
  CHECK(FrameRange::parse("0:").select(4) == std::vector<std::int64_t>{0, 1, 2, 3});
  CHECK(FrameRange::parse("1:3").select(10) == std::vector<std::int64_t>{1, 2});
  CHECK(FrameRange::parse("::3").select(7) == std::vector<std::int64_t>{0, 3, 6});
  CHECK(FrameRange::parse("5").select(10) == std::vector<std::int64_t>{5});
  CHECK(FrameRange::parse("8:").select(4).empty());
  CHECK_THROWS_AS(FrameRange::parse("a:b"), Error);
  CHECK_THROWS_AS(FrameRange::parse("0:4:0"), Error);
}

// size() is len(range(start, min(stop, count), step)) of Python's built-in
// range (Python Library Reference, "Ranges") [common practice], without
// making the list: what refuses a sparse dataset declaring 2^40 frames.
TEST_CASE("frame range sizes match the selected lists, and need no list") {
  for (const char* r : {"0:", "1:3", "::3", "5", "8:", "2:9:2", "0:7:7", "3:4:100", "6:7"})
    for (std::int64_t n : {0, 1, 4, 7, 10, 11})
      CHECK(FrameRange::parse(r).size(n) == static_cast<std::int64_t>(FrameRange::parse(r).select(n).size()));
  const std::int64_t huge = std::int64_t{1} << 40;
  CHECK(FrameRange::parse("0:").size(huge) == huge);
  CHECK(FrameRange::parse("1::2").size(huge) == huge / 2);
  CHECK(FrameRange::parse("10:20").size(huge) == 10);
}
