// Residues of wrapped phase (Goldstein, Zebker & Werner, Radio Science
// 23(4) 713 (1988)): vortices, smooth fields, an independent numpy
// computation (tests/unwrap/reference_unwrap.py) and the boundary identity.
#include "unwrap_test_util.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/unwrap/residues.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <cstdio>
#include <limits>

using namespace wavestack;
using namespace wavestack::unwrap;

namespace {

/// Phase of a field with vortices of the given charges at (y, x) centres.
Image<float> vortices(std::size_t h, std::size_t w, std::initializer_list<std::tuple<double, double, int>> v) {
  Image<float> ph(h, w);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) {
      double a = 0;
      for (auto [cy, cx, m] : v) a += m * std::atan2(double(y) - cy, double(x) - cx);
      ph(y, x) = static_cast<float>(std::atan2(std::sin(a), std::cos(a)));
    }
  return ph;
}

} // namespace

TEST_CASE("a vortex exp(iθ) has exactly one residue of its sign at its centre") {
  // Goldstein et al. 1988 [from memory]: the loop sum of wrapped differences
  // is 2π·q; around a vortex exp(i·m·θ) it is 2π·m for the loop enclosing the
  // singularity and 0 elsewhere [derived: the circulation of θ]. The loop
  // (+x, +y, −x, −y) is counter-clockwise for x = column, y = row, so
  // θ = atan2(y − y0, x − x0) gives +1 (residues.hpp).
  const std::size_t h = 64, w = 80;
  for (int sign : {+1, -1}) {
    const Image<float> ph = vortices(h, w, {{30.4, 41.7, sign}});
    Image<std::int8_t> map(h - 1, w - 1);
    const auto c = residues(ph.view(), map.view());
    CHECK(map(30, 41) == sign);
    CHECK(c.total() == 1);
    CHECK(c.positive == (sign > 0 ? 1u : 0u));
    CHECK(c.negative == (sign < 0 ? 1u : 0u));
    CHECK(c.loops == (h - 1) * (w - 1));
  }
  // A dipole: one of each, at their own loops.
  const Image<float> dip = vortices(h, w, {{10.5, 12.5, +1}, {50.2, 60.6, -1}});
  Image<std::int8_t> map(h - 1, w - 1);
  const auto c = residues(dip.view(), map.view());
  CHECK(c.positive == 1);
  CHECK(c.negative == 1);
  CHECK(map(10, 12) == 1);
  CHECK(map(50, 60) == -1);
}

TEST_CASE("a smooth field has no residues") {
  // A finely sampled surface (all neighbour steps < π) has wrapped
  // differences equal to the true ones, whose loop sums vanish [derived].
  const Image<float> truth = unwrap_test::synthetic_surface(200, 160, 60.0);
  REQUIRE(unwrap_test::max_step(truth) < 2.5);
  const auto c = count_residues(unwrap_test::wrapped(truth).view());
  CHECK(c.total() == 0);
  CHECK(c.loops == 199u * 159u);
  CHECK_FALSE(exceeds(c, 0));
}

TEST_CASE("residue counts on noisy data agree with an independent numpy computation") {
  // reference_unwrap.py computes the same loop sums in float64 with numpy's
  // own wrapping. The maps must be identical: they could differ only where a
  // difference lies within float32 rounding (~2e-7 rad) of ±π, which this
  // fixed input does not have (if it did, the counts would differ by one).
  // Independent identity [derived]: inner edges cancel, so the total charge
  // equals the circulation along the frame border / 2π.
  const std::size_t h = 150, w = 170;
  Image<float> noisy = unwrap_test::synthetic_surface(h, w, 50.0);
  unwrap_test::add_noise(noisy, 0.9, 31);
  const Image<float> wr = unwrap_test::wrapped(noisy);
  Image<std::int8_t> map(h - 1, w - 1);
  const auto c = residues(wr.view(), map.view());

  const std::string in = unwrap_test::temp_path("res_in"), out = unwrap_test::temp_path("res_out");
  unwrap_test::TempFiles cleanup{{in, out}};
  unwrap_test::write_raw<float>(in, wr.view());
  std::string args = "residues ";
  for (const std::string& a : {unwrap_test::quoted(in), unwrap_test::quoted(out), std::to_string(h), std::to_string(w)}) {
    args += a;
    args += ' ';
  }
  REQUIRE(unwrap_test::run_python(WAVESTACK_SOURCE_DIR "/tests/unwrap/reference_unwrap.py", args) == 0);
  const Image<std::int8_t> ref = unwrap_test::read_raw<std::int8_t>(out, h - 1, w - 1);
  REQUIRE(!ref.empty());
  std::size_t pos = 0, neg = 0, differ = 0;
  for (std::size_t i = 0; i < ref.size(); ++i) {
    pos += ref.data()[i] > 0, neg += ref.data()[i] < 0;
    differ += ref.data()[i] != map.data()[i];
  }
  INFO("wavestack " << c.positive << "+/" << c.negative << "-, numpy " << pos << "+/" << neg << "-");
  CHECK(c.total() > 500); // plausibly many at 0.9 rad of noise
  CHECK(differ == 0);
  CHECK(c.positive == pos);
  CHECK(c.negative == neg);

  auto wd = [](double d) { return d - two_pi * std::floor((d + pi) / two_pi); };
  double circ = 0; // counter-clockwise along the border: top row +x, right column +y, bottom −x, left −y
  for (std::size_t x = 0; x + 1 < w; ++x) circ += wd(double(wr(0, x + 1)) - wr(0, x));
  for (std::size_t y = 0; y + 1 < h; ++y) circ += wd(double(wr(y + 1, w - 1)) - wr(y, w - 1));
  for (std::size_t x = w - 1; x > 0; --x) circ += wd(double(wr(h - 1, x - 1)) - wr(h - 1, x));
  for (std::size_t y = h - 1; y > 0; --y) circ += wd(double(wr(y - 1, 0)) - wr(y, 0));
  CHECK(double(c.positive) - double(c.negative) == Approx(circ / two_pi).margin(1e-6));
}

TEST_CASE("residue masks, non-finite pixels, thresholds and shape checks") {
  const std::size_t h = 64, w = 80;
  const Image<float> ph = vortices(h, w, {{30.4, 41.7, 1}});
  Image<std::uint8_t> valid(h, w, 1);
  valid(31, 42) = 0; // a corner of the vortex loop
  Image<std::int8_t> map(h - 1, w - 1);
  const auto c = residues(ph.view(), valid.view(), map.view());
  CHECK(c.total() == 0);
  CHECK(c.loops == (h - 1) * (w - 1) - 4); // the four loops around the pixel [derived]
  CHECK(map(30, 41) == 0);
  Image<float> nan = ph;
  nan(30, 41) = std::numeric_limits<float>::quiet_NaN();
  CHECK(count_residues(nan.view()).total() == 0);
  CHECK(count_residues(nan.view()).loops == (h - 1) * (w - 1) - 4);

  ResidueCount r;
  r.positive = 3, r.negative = 2, r.loops = 1000;
  CHECK(exceeds(r, 4));
  CHECK_FALSE(exceeds(r, 5));
  CHECK(r.density() == Approx(0.005));
  CHECK(exceeds_density(r, 0.001));
  CHECK_FALSE(exceeds_density(r, 0.01));
  CHECK_THROWS_AS(residues(ph.view(), Image<std::int8_t>(h, w).view()), Error);
  CHECK(count_residues(Image<float>(1, 5, 0.f).view()).loops == 0);
}
