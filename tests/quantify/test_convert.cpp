// Phase to OPD and height.
#include "wavestack/core/error.hpp"
#include "wavestack/quantify/convert.hpp"

#include <catch2/catch.hpp>

#include <cmath>

using namespace wavestack;
using namespace wavestack::quantify;

TEST_CASE("OPD = φ·λ0/(2π) and heights in transmission and reflection") {
  // OPD = φλ0/(2π) (REFERENCES.md "Quantitative phase and dry mass":
  // φ = (2π/λ0)·Δn·t [common practice; from memory]); h = OPD/Δn in
  // transmission; in reflection the path is crossed twice, φ = 4πh/λ0, so
  // h = OPD/2 [derived]. Exact up to float rounding of the output (1e-6
  // relative).
  const double lambda = 632.8e-9;
  CHECK(nm_per_radian(lambda) == Approx(632.8 / (2 * M_PI)).epsilon(1e-15));
  Image<float> phase(2, 3);
  const float vals[6] = {0.0f, static_cast<float>(2 * M_PI), static_cast<float>(-M_PI), 1.0f, 12.68f, std::nanf("")};
  for (int i = 0; i < 6; ++i) phase.data()[i] = vals[i];
  Image<float> out(2, 3);

  ConversionOptions o;
  o.wavelength = lambda;
  PhaseConverter opd(o);
  opd.apply(phase.view(), out.view());
  CHECK(out.data()[0] == 0.0f);
  CHECK(out.data()[1] == Approx(632.8).epsilon(1e-6)); // one wave = λ0
  CHECK(out.data()[2] == Approx(-316.4).epsilon(1e-6));
  CHECK(std::isnan(out.data()[5]));

  o.quantity = Quantity::height_transmission;
  o.index_difference = 1.58753 - 1.33211; // polystyrene in water, REFERENCES.md [derived]
  PhaseConverter tr(o);
  tr.apply(phase.view(), out.view());
  CHECK(out.data()[1] == Approx(632.8 / 0.25542).epsilon(1e-6));
  CHECK(tr.scale() == Approx(632.8 / (2 * M_PI) / 0.25542).epsilon(1e-12));

  o.quantity = Quantity::height_reflection;
  PhaseConverter rf(o);
  // A 50 nm step in reflection: φ = 4π·50/632.8 rad [derived].
  Image<float> step(1, 1, static_cast<float>(4 * M_PI * 50 / 632.8)), h(1, 1);
  rf.apply(step.view(), h.view());
  CHECK(h(0, 0) == Approx(50.0).epsilon(1e-6));
  o.toward_objective = true;
  PhaseConverter rf2(o);
  rf2.apply(step.view(), h.view());
  CHECK(h(0, 0) == Approx(-50.0).epsilon(1e-6));

  // Free functions and in-place use.
  Image<float> buf(1, 2);
  buf(0, 0) = 100.0f;
  buf(0, 1) = -40.0f;
  opd_to_height_reflection(buf.view(), buf.view());
  CHECK(buf(0, 0) == 50.0f);
  CHECK(buf(0, 1) == -20.0f);
  opd_to_height_transmission(buf.view(), 0.05, buf.view());
  CHECK(buf(0, 0) == Approx(1000.0f));
}

TEST_CASE("conversion errors") {
  ConversionOptions o;
  CHECK_THROWS_AS(PhaseConverter(o), Error); // no wavelength
  o.wavelength = 532e-9;
  o.quantity = Quantity::height_transmission;
  CHECK_THROWS_AS(PhaseConverter(o), Error); // Δn = 0
  o.quantity = Quantity::opd;
  PhaseConverter c(o);
  Image<float> a(2, 2, 0.0f), b(2, 3);
  try {
    c.apply(a.view(), b.view());
    FAIL("expected an error");
  } catch (const Error& e) {
    CHECK(e.kind() == ErrorKind::config);
  }
}
