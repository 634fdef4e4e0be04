#include "wavestack/core/error.hpp"
#include "wavestack/core/units.hpp"

#include <catch2/catch.hpp>

using namespace wavestack;

// SI prefixes (BIPM, The International System of Units, 9th ed. 2019) [common practice]
TEST_CASE("lengths parse with every accepted unit") {
  CHECK(parse_length("632.8 nm") == Approx(632.8e-9).epsilon(1e-12));
  CHECK(parse_length("3.45 um") == Approx(3.45e-6).epsilon(1e-12));
  CHECK(parse_length("3.45 \xC2\xB5m") == Approx(3.45e-6).epsilon(1e-12));
  CHECK(parse_length("3.45 \xCE\xBCm") == Approx(3.45e-6).epsilon(1e-12));
  CHECK(parse_length("0.5mm") == Approx(0.5e-3).epsilon(1e-12));
  CHECK(parse_length("-20 um") == Approx(-20e-6).epsilon(1e-12));
  CHECK(parse_length("+1e-6 m") == Approx(1e-6).epsilon(1e-12));
  CHECK(parse_length("  2 cm ") == Approx(0.02).epsilon(1e-12));
  CHECK(parse_length("40 pm") == Approx(40e-12).epsilon(1e-12));
}

TEST_CASE("bare numbers and unknown units are rejected with the expected form") {
  try {
    parse_length("12.5");
    FAIL("no error");
  } catch (const Error& e) {
    CHECK(e.kind() == ErrorKind::config);
    CHECK_THAT(e.message(), Catch::Contains("12.5 um") && Catch::Contains("bare number"));
  }
  try {
    parse_length("12.5 inch");
    FAIL("no error");
  } catch (const Error& e) {
    CHECK_THAT(e.message(), Catch::Contains("unknown length unit \"inch\""));
  }
  CHECK_THROWS_AS(parse_length(""), Error);
  CHECK_THROWS_AS(parse_length("nm"), Error);
  CHECK_FALSE(try_parse_length("inf nm"));
}

TEST_CASE("lengths format with a readable unit") {
  CHECK(format_length(12.5e-6) == "12.5 um");
  CHECK(format_length(632.8e-9) == "632.8 nm");
  CHECK(format_length(-2e-3) == "-2 mm");
}
