// The band-limited angular spectrum against a direct numerical
// Rayleigh–Sommerfeld summation computed independently in numpy.
#include "propagate_test_util.hpp"

#include "wavestack/propagate/angular_spectrum.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <complex>
#include <cstdio>
#include <string>
#include <vector>

using namespace wavestack;
using namespace propagate_test;
using propagate::AngularSpectrum;

namespace {

/// Test object: two Gaussian spots of different size and phase, one tilted
/// (asymmetric in x and y, so a transposed or mirrored result fails).
std::complex<double> object(double y, double x) {
  const std::complex<double> a = std::exp(-(std::pow(x - 2e-6, 2) + std::pow(y + 1e-6, 2)) / std::pow(1.6e-6, 2));
  const std::complex<double> b = std::complex<double>(0, 0.7) *
                                 std::exp(-(std::pow(x + 3e-6, 2) + std::pow(y - 2e-6, 2)) / std::pow(2e-6, 2)) *
                                 std::polar(1.0, 2 * M_PI * (0.15e6 * x - 0.1e6 * y));
  return a + b;
}

/// Samples of object() on an h×w grid with origin at sample (h/2, w/2).
std::vector<std::complex<double>> sample(std::size_t h, std::size_t w, double dy, double dx) {
  std::vector<std::complex<double>> v(h * w);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x)
      v[y * w + x] = object((static_cast<double>(y) - h / 2.0) * dy, (static_cast<double>(x) - w / 2.0) * dx);
  return v;
}

std::string num(double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.17g", v);
  return buf;
}

} // namespace

TEST_CASE("angular spectrum agrees with a direct Rayleigh-Sommerfeld summation") {
  // First Rayleigh–Sommerfeld integral, exact kernel
  // h = z(1 − ikr)e^{ikr}/(2πr³) (Goodman, Introduction to Fourier Optics,
  // 3rd ed. (2005) ch. 3 [from memory]; REFERENCES.md Propagation
  // [from memory], −2∂/∂z of e^{ikr}/(4πr) [derived]). By Weyl's identity the
  // rigorous RS integral and the angular spectrum are the same propagator
  // (Konijnenberg, Adam & Urbach, BSc Optics, Sec. 6.5 [confirmed]), so the
  // difference measures only numerical error. REFERENCES.md Rayleigh–
  // Sommerfeld direct summation [common practice].
  //
  // The numpy sum is a quadrature: it is accurate when the product of field
  // and kernel is well sampled. The kernel carries spatial frequencies up to
  // n sinθ/λ0 over the lateral distances involved; in the near field in
  // water (last case) that exceeds what 0.45–0.5 µm samples can integrate
  // (the coarse sum is off by ~18%, the reference, not the angular
  // spectrum), so that case integrates on a 2x finer sampling of the same
  // object and compares on the common samples.
  //
  // Non-paraxial on purpose: spot sizes ~λ·3 (angles up to ~0.3 rad). The
  // 1e-3 tolerance is the brief's; the prototype in double gave 1e-7–5e-7,
  // float32 adds ~1e-6.
  struct Case {
    double index, z;
    std::size_t fine; // quadrature refinement of the reference
    const char* what;
  };
  const Case cases[] = {
      {1.0, 15e-6, 1, "vacuum, band limit inactive"},
      {1.0, 40e-6, 1, "vacuum, band limit active (0.81/um < Nyquist 1/um)"},
      {1.333, 30e-6, 1, "water"},
      {1.333, 8e-6, 2, "water, near field, 2x finer reference quadrature"},
  };
  const std::size_t h = 40, w = 48;
  const double dy = 0.45e-6, dx = 0.5e-6, lambda0 = 0.6328e-6;
  for (const Case& c : cases) {
    INFO(c.what << ": n = " << c.index << ", z = " << c.z);
    Grid g;
    g.dy = dy;
    g.dx = dx;
    g.wavelength = lambda0;
    g.medium_index = c.index;
    AngularSpectrum as(h, w, g, c.z);
    if (c.z == 40e-6) REQUIRE(as.band_limit_fx() < 1.0 / (2 * dx));

    const auto coarse = sample(h, w, dy, dx);
    const std::size_t fh = h * c.fine, fw = w * c.fine;
    const auto ref_in = c.fine == 1 ? coarse : sample(fh, fw, dy / c.fine, dx / c.fine);
    const std::string tag = std::to_string(static_cast<int>(c.index * 1000)) + "_" + std::to_string(c.fine) + "_" +
                            std::to_string(static_cast<int>(c.z * 1e6));
    TempFiles tmp{{temp_path("rs_in_" + tag), temp_path("rs_out_" + tag)}};
    write_raw(tmp.paths[0], ref_in);
    const std::string args = std::string("rs ") + shell_quoted(tmp.paths[0]) + " " + shell_quoted(tmp.paths[1]) + " " +
                             std::to_string(fh) + " " + std::to_string(fw) + " " + num(dy / c.fine) + " " +
                             num(dx / c.fine) + " " + num(lambda0) + " " + num(c.index) + " " + num(c.z) + " " +
                             std::to_string(c.fine);
    REQUIRE(run_reference(args) == 0);
    const auto ref = read_raw<std::complex<double>>(tmp.paths[1], h * w);
    REQUIRE(ref.size() == h * w);

    Image<cfloat> u(h, w), out(h, w), expect(h, w);
    for (std::size_t i = 0; i < h * w; ++i) {
      u.data()[i] = cfloat(coarse[i]);
      expect.data()[i] = cfloat(ref[i]);
    }
    auto ws = as.make_workspace();
    as.apply(u.view(), out.view(), ws);
    CHECK(rel_rms(out.view(), expect.view()) < 1e-3);
    // The field did change: this is not a near-identity comparison.
    CHECK(rel_rms(u.view(), expect.view()) > 0.3);
  }
}
