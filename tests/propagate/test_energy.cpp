// Energy conservation (Parseval) and reversibility of every method of the
// common Propagator interface.
#include "propagate_test_util.hpp"

#include "wavestack/propagate/propagator.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <utility>
#include <vector>

using namespace wavestack;
using namespace propagate_test;
using namespace wavestack::propagate;

namespace {

constexpr double hene = 0.6328e-6;
// Even and odd shapes that are their own good FFT size (padding none means none).
const std::vector<std::pair<std::size_t, std::size_t>> shapes = {{64, 64}, {45, 81}};

PropagatorOptions opts(Method m, Padding p) {
  PropagatorOptions o;
  o.method = m;
  o.padding = p;
  return o;
}

Image<cfloat> run(const Propagator& p, const Image<cfloat>& u) {
  auto ws = p.make_workspace();
  Image<cfloat> out(p.out_height(), p.out_width());
  p.apply(u.view(), out.view(), ws);
  return out;
}

} // namespace

TEST_CASE("Parseval: propagating waves keep their energy under every method") {
  // |H| = 1 for propagating waves, so sum |U_z|² = sum |U_0|² (Goodman 2005
  // ch. 3–4 [from memory]); the single-FFT Fresnel transform is unitary up
  // to its pitch change: sum |U2|² Δx2 Δy2 = sum |U1|² Δx1 Δy1 because
  // Δx1 Δx2 = λz/N per axis and the DFT multiplies energy by N [derived].
  // Circular propagation (padding none) so nothing leaves the window; 1 µm
  // grid, every bin propagating (1/λ = 1.58/µm > √2 · Nyquist 0.71/µm), band
  // limits above Nyquist (ASM at 10 µm: 1.5/µm; Fresnel TF at 50 µm: L/(2λz) >=
  // 0.71/µm). Tolerance 1e-5: float32 FFT round-off.
  const Grid g = grid_of(1e-6, 1e-6, hene);
  for (auto [h, w] : shapes) {
    INFO("shape " << h << "x" << w);
    const Image<cfloat> u = random_band_limited(h, w, 1e-6, 1e-6, static_cast<unsigned>(h + w),
                                                [](double, double) { return true; });
    const double e0 = energy(u.view());
    for (double z : {10e-6, -10e-6}) {
      auto p = make_propagator(h, w, g, z, opts(Method::angular_spectrum, Padding::none()));
      const Image<cfloat> out = run(*p, u);
      CHECK(std::abs(energy(out.view()) / e0 - 1) < 1e-5);
      CHECK(rel_rms(out.view(), u.view()) > 0.1);
    }
    for (double z : {50e-6, -50e-6}) {
      auto p = make_propagator(h, w, g, z, opts(Method::fresnel, Padding::none()));
      auto* tp = dynamic_cast<TransferPropagator*>(p.get());
      REQUIRE(tp != nullptr);
      REQUIRE(tp->transfer_function()->band_limit_fx() >= 0.5e6);
      REQUIRE(tp->transfer_function()->band_limit_fy() >= 0.5e6);
      const Image<cfloat> out = run(*p, u);
      CHECK(std::abs(energy(out.view()) / e0 - 1) < 1e-5);
      CHECK(rel_rms(out.view(), u.view()) > 0.1);
    }
    for (double z : {3e-3, -3e-3})
      for (Padding pad : {Padding::none(), Padding::of(2)}) {
        auto p = make_propagator(h, w, g, z, opts(Method::fresnel_single_fft, pad));
        const Image<cfloat> out = run(*p, u);
        const Grid& g2 = p->output_grid();
        const double e2 = energy(out.view()) * g2.dx * g2.dy, e1 = e0 * g.dx * g.dy;
        CHECK(std::abs(e2 / e1 - 1) < 1e-5);
      }
  }
}

TEST_CASE("reversibility: +z then -z returns the field for every method") {
  // Transfer functions: H(−z) = H(z)* on the kept band (REFERENCES.md
  // Propagation [from memory]; Fresnel TF by inspection), so a field inside
  // the band limit comes back; circular (padding none) and padded with a
  // field that stays inside the window. Single-FFT Fresnel: the −z step on
  // the +z output grid is the inverse DFT with conjugate chirps, an exact
  // inverse [derived, propagator.hpp]. Tolerance 1e-5: two float32 FFT pairs.
  const Grid g = grid_of(1e-6, 1e-6, hene);
  for (auto [h, w] : shapes) {
    INFO("shape " << h << "x" << w);
    for (Method m : {Method::angular_spectrum, Method::fresnel}) {
      INFO(method_name(m));
      const double z = 150e-6; // band limits ~0.3/µm, below Nyquist: active
      auto fwd = make_propagator(h, w, g, z, opts(m, Padding::none()));
      auto bwd = make_propagator(h, w, g, -z, opts(m, Padding::none()));
      const auto& tf = dynamic_cast<TransferPropagator&>(*fwd).transfer_function();
      REQUIRE(tf->band_limit_fx() < 0.5e6);
      const double ux = 0.9 * tf->band_limit_fx(), uy = 0.9 * tf->band_limit_fy();
      const Image<cfloat> u = random_band_limited(h, w, 1e-6, 1e-6, 5u, [&](double fy, double fx) {
        return std::abs(fx) <= ux && std::abs(fy) <= uy;
      });
      const Image<cfloat> a = run(*fwd, u);
      CHECK(rel_rms(run(*bwd, a).view(), u.view()) < 1e-5);
      CHECK(rel_rms(a.view(), u.view()) > 0.1);

      // Padded (auto), a band-limited field under a Gaussian envelope of
      // 1/e radius 0.1 of the window (tails e^-25 at the edges), z = 3 µm.
      Image<cfloat> v = random_band_limited(h, w, 1e-6, 1e-6, 6u, [](double fy, double fx) {
        return std::abs(fx) <= 0.15e6 && std::abs(fy) <= 0.15e6;
      });
      for (std::size_t y = 0; y < h; ++y)
        for (std::size_t x = 0; x < w; ++x) {
          const double ry = (y - (h - 1) / 2.0) / (0.1 * h), rx = (x - (w - 1) / 2.0) / (0.1 * w);
          v(y, x) *= static_cast<float>(std::exp(-(rx * rx + ry * ry)));
        }
      auto f2 = make_propagator(h, w, g, 3e-6, opts(m, Padding::automatic()));
      auto b2 = make_propagator(h, w, g, -3e-6, opts(m, Padding::automatic()));
      CHECK(rel_rms(run(*b2, run(*f2, v)).view(), v.view()) < 1e-5);
    }
    // Single-FFT Fresnel: padded forward (output ph×pw), back on that grid.
    const Image<cfloat> u = random_band_limited(h, w, 1e-6, 1e-6, 7u, [](double, double) { return true; });
    for (double z : {2e-3, -2e-3}) {
      INFO("single-FFT, z = " << z);
      auto fwd = make_propagator(h, w, g, z, opts(Method::fresnel_single_fft, Padding::of(2)));
      const std::size_t ph = fwd->out_height(), pw = fwd->out_width();
      const Image<cfloat> a = run(*fwd, u);
      auto bwd = make_propagator(ph, pw, fwd->output_grid(), -z, opts(Method::fresnel_single_fft, Padding::none()));
      REQUIRE(bwd->out_height() == ph);
      REQUIRE(bwd->out_width() == pw);
      CHECK(bwd->output_grid().dx == Approx(g.dx).epsilon(1e-14));
      CHECK(bwd->output_grid().dy == Approx(g.dy).epsilon(1e-14));
      CHECK(bwd->output_grid().plane == Approx(0.0).margin(1e-18));
      const Image<cfloat> b = run(*bwd, a);
      // The input comes back zero-padded, its pixel (h/2, w/2) at (ph/2, pw/2).
      Image<cfloat> expect(ph, pw, cfloat(0, 0));
      for (std::size_t y = 0; y < h; ++y)
        for (std::size_t x = 0; x < w; ++x) expect(y + ph / 2 - h / 2, x + pw / 2 - w / 2) = u(y, x);
      CHECK(rel_rms(b.view(), expect.view()) < 1e-5);
    }
  }
}
