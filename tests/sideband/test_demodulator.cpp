#include "python_reference.hpp"
#include "synthetic_hologram.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/fft/fft.hpp"
#include "wavestack/sideband/carrier.hpp"
#include "wavestack/sideband/demodulator.hpp"

#include <catch2/catch.hpp>

#include <atomic>
#include <cmath>
#include <complex>
#include <cstdlib>
#include <new>

// Count plain operator new calls program-wide, to check that apply() does
// not allocate (Image buffers use aligned_alloc, checked by pointer identity).
// Sanitizer runtimes bring their own operator new; there the count is skipped.
namespace {
std::atomic<long> g_new_calls{0};
}
#if defined(__SANITIZE_ADDRESS__)
constexpr bool g_counting_new = false;
#else
constexpr bool g_counting_new = true;
void* operator new(std::size_t n) {
  ++g_new_calls;
  if (void* p = std::malloc(n ? n : 1)) return p;
  throw std::bad_alloc();
}
void* operator new[](std::size_t n) { return ::operator new(n); }
// GCC cannot see that operator new above is malloc-based; the pairing is right.
#pragma GCC diagnostic push
#pragma GCC diagnostic ignored "-Wmismatched-new-delete"
void operator delete(void* p) noexcept { std::free(p); }
void operator delete(void* p, std::size_t) noexcept { std::free(p); }
void operator delete[](void* p) noexcept { std::free(p); }
void operator delete[](void* p, std::size_t) noexcept { std::free(p); }
#pragma GCC diagnostic pop
#endif

using namespace wavestack;
using namespace wavestack::sideband;
using sideband_test::Scene;

namespace {

using sideband_test::size_cases;

struct PhaseError {
  double rms = 0;       ///< rad, piston removed
  double amplitude = 0; ///< mean |out| in the region
  std::size_t n = 0;
};

/// Compare a demodulated field with sign·φ of the scene inside the object
/// region (disc of radius 0.3·min(h,w) around the frame centre, in
/// hologram pixels), piston removed.
PhaseError phase_error(const Scene& s, const Image<cfloat>& out, double sign) {
  const double ry = static_cast<double>(s.h) / static_cast<double>(out.height());
  const double rx = static_cast<double>(s.w) / static_cast<double>(out.width());
  const double rad = 0.3 * static_cast<double>(std::min(s.h, s.w));
  std::vector<double> d;
  std::complex<double> piston = 0;
  PhaseError pe;
  for (std::size_t p = 0; p < out.height(); ++p)
    for (std::size_t q = 0; q < out.width(); ++q) {
      const double y = p * ry, x = q * rx;
      if (std::hypot(y - 0.5 * s.h, x - 0.5 * s.w) > rad) continue;
      const std::complex<double> o(out(p, q).real(), out(p, q).imag());
      const double e = std::arg(o * std::polar(1.0, -sign * s.phase(y, x)));
      d.push_back(e);
      piston += std::polar(1.0, e);
      pe.amplitude += std::abs(o);
    }
  pe.n = d.size();
  const double p0 = std::arg(piston);
  double sum = 0;
  for (double e : d) {
    const double r = std::remainder(e - p0, 2 * M_PI);
    sum += r * r;
  }
  pe.rms = std::sqrt(sum / static_cast<double>(pe.n));
  pe.amplitude /= static_cast<double>(pe.n);
  return pe;
}

Image<cfloat> demodulate(const Demodulator& dm, const Image<float>& holo) {
  Image<cfloat> out(dm.crop_height(), dm.crop_width());
  auto ws = dm.make_workspace();
  dm.apply(holo.view(), out.view(), ws);
  return out;
}

ErrorKind construct_error(std::size_t h, std::size_t w, const Grid& g, const Carrier& c, DemodulatorOptions o) {
  try {
    Demodulator dm(h, w, g, c, Order::plus1, o);
  } catch (const Error& e) {
    return e.kind();
  }
  return ErrorKind::internal; // no error at all
}

} // namespace

TEST_CASE("demodulation recovers a smooth phase object to 0.02 rad RMS") {
  // Fourier-transform method of fringe analysis (Takeda, Ina & Kobayashi,
  // JOSA 72(1) 156 (1982) [authors and year confirmed; journal data from
  // memory]) applied to off-axis holography with a +1-order mask (Cuche,
  // Marquet & Depeursinge, Appl. Opt. 39(23) 4070 (2000) [from memory]).
  // Carrier from the object-free background, as the pipeline plans it.
  // Tolerance 0.02 rad RMS (λ/300): the lobe is band-limited well inside the
  // 1/3 mask, so what remains is float32 rounding, the finite-frame leakage
  // of the non-integer carrier and the carrier estimate (< 0.02 bin, see
  // test_carrier). Amplitude: the documented convention out = O for |R| = 1;
  // 1 % tolerance for the same leakage.
  for (const Scene& s : size_cases()) {
    CAPTURE(s.h, s.w, s.ky, s.kx);
    const Carrier c = find_carrier(s.hologram(false).view(), s.grid());
    const Demodulator dm(s.h, s.w, s.grid(), c, Order::plus1);
    const Image<cfloat> out = demodulate(dm, s.hologram(true));
    const PhaseError pe = phase_error(s, out, +1.0);
    CAPTURE(pe.rms, pe.amplitude, pe.n, dm.crop_height(), dm.crop_width());
    CHECK(pe.n > 100);
    CHECK(pe.rms < 0.02);
    CHECK(pe.amplitude == Approx(s.amplitude).epsilon(0.01));
  }
}

TEST_CASE("the -1 order gives the conjugate field (twin image)") {
  // The -1 lobe of a real hologram is the mirror of the +1 lobe,
  // S(-k) = conj S(k), and holds O* (Cuche et al. 2000, twin image [from
  // memory]; Hermitian symmetry of the DFT of real data [derived]). With a
  // point-symmetric mask and ramp the -1 output equals conj(+1 output) up to
  // float32 FFT rounding: tolerance 1e-4 absolute on |O| = 0.7 values.
  for (const Scene& s : size_cases()) {
    CAPTURE(s.h, s.w);
    const Carrier c = find_carrier(s.hologram(false).view(), s.grid());
    const Demodulator plus(s.h, s.w, s.grid(), c, Order::plus1);
    const Demodulator minus(s.h, s.w, s.grid(), c, Order::minus1);
    CHECK(minus.center_ky() == -plus.center_ky());
    CHECK(minus.center_kx() == -plus.center_kx());
    CHECK(minus.residual_ky() == Approx(-plus.residual_ky()));
    REQUIRE(minus.crop_height() == plus.crop_height());
    REQUIRE(minus.crop_width() == plus.crop_width());
    const Image<float> holo = s.hologram(true);
    const Image<cfloat> op = demodulate(plus, holo), om = demodulate(minus, holo);
    double worst = 0;
    for (std::size_t i = 0; i < op.size(); ++i)
      worst = std::max(worst, static_cast<double>(std::abs(om.data()[i] - std::conj(op.data()[i]))));
    CHECK(worst < 1e-4);
    CHECK(phase_error(s, om, -1.0).rms < 0.02);
  }
}

TEST_CASE("the output grid has pitch h*dy/ch after the crop") {
  // Inverse DFT of a ch-bin crop of an h-bin spectrum samples the same
  // window h·dy with ch points [derived from the DFT definition, FFTW manual
  // [confirmed]]. The crop holds the whole outer mask: ch >= 2·outer bins + 1.
  for (const Scene& s : size_cases()) {
    CAPTURE(s.h, s.w);
    const Grid g = s.grid();
    const Demodulator dm(s.h, s.w, g, carrier_from_frequency(s.fy(), s.fx(), s.h, s.w, g), Order::plus1);
    const Grid o = dm.output_grid();
    CHECK(o.dy == Approx(s.h * s.dy / dm.crop_height()).epsilon(1e-14));
    CHECK(o.dx == Approx(s.w * s.dx / dm.crop_width()).epsilon(1e-14));
    CHECK(o.wavelength == g.wavelength);
    CHECK(o.medium_index == g.medium_index);
    CHECK(o.plane == g.plane);
    CHECK(dm.crop_height() % 2 == 0);
    CHECK(dm.crop_width() % 2 == 0);
    CHECK(dm.crop_height() <= s.h);
    CHECK(dm.crop_width() <= s.w);
    CHECK(dm.crop_height() >= 2 * dm.outer_radius() * s.h * s.dy + 1);
    CHECK(dm.crop_width() >= 2 * dm.outer_radius() * s.w * s.dx + 1);
    CHECK(dm.outer_radius() == Approx(dm.radius() * 1.1));
    CHECK(dm.radius() == Approx(std::hypot(s.fy(), s.fx()) / 3.0));
    CHECK_FALSE(dm.clipped());
  }
}

TEST_CASE("an NA-driven radius equals NA/lambda0 in cycles per metre") {
  // Coherent cutoff of the objective NA/λ0 in object space [common practice];
  // the zero-order exclusion is then 2·NA/λ0 (autocorrelation of the object
  // spectrum) [derived].
  Scene s;
  s.dy = s.dx = 4.8e-6 / 25.0; // 25x objective, 4.8 um camera pixels
  s.ky = 50.3;
  s.kx = 80.6;
  const Grid g = s.grid(); // 532 nm
  DemodulatorOptions o;
  o.numerical_aperture = 0.3;
  log::clear_warnings();
  const Demodulator dm(s.h, s.w, g, carrier_from_frequency(s.fy(), s.fx(), s.h, s.w, g), Order::plus1, o);
  CHECK(dm.radius() == Approx(0.3 / 532e-9).epsilon(1e-12));
  CHECK(dm.dc_exclusion() == Approx(2 * 0.3 / 532e-9).epsilon(1e-12));
  CHECK(log::warnings().empty()); // carrier distance > 3·NA/λ0 here
  // And it demodulates the object (its bandwidth is far below NA/λ0).
  CHECK(phase_error(s, demodulate(dm, s.hologram(true)), +1.0).rms < 0.02);
}

TEST_CASE("a radius above 1/3 of the carrier distance warns") {
  // DESIGN.md: 1/3 is the largest radius that cannot overlap the zero order
  // (which extends to twice the object band) [derived: B + 2B <= |fc|].
  const Scene s;
  const Grid g = s.grid();
  const Carrier c = carrier_from_frequency(s.fy(), s.fx(), s.h, s.w, g);
  log::clear_warnings();
  { Demodulator dm(s.h, s.w, g, c, Order::plus1); } // exactly 1/3: no warning
  CHECK(log::warnings().empty());
  DemodulatorOptions o;
  o.radius_fraction = 0.4;
  { Demodulator dm(s.h, s.w, g, c, Order::plus1, o); }
  auto w = log::warnings();
  REQUIRE(w.size() == 1);
  CHECK(w[0].find("more than 1/3") != std::string::npos);
  // An explicit radius in cycles/m is checked the same way.
  log::clear_warnings();
  o = {};
  o.radius = 0.5 * c.distance();
  { Demodulator dm(s.h, s.w, g, c, Order::plus1, o); }
  w = log::warnings();
  REQUIRE(w.size() == 1);
  CHECK(w[0].find("more than 1/3") != std::string::npos);
}

TEST_CASE("a mask beyond the spectrum edge is clipped with a warning") {
  // Frequencies beyond Nyquist 1/(2d) do not exist in the sampled hologram
  // (FFTW/numpy bin layout [confirmed]): those mask bins are dropped.
  Scene s;
  s.ky = 0.44 * s.h; // 112.6 bins of 128
  s.kx = 20.3;
  const Grid g = s.grid();
  log::clear_warnings();
  const Demodulator dm(s.h, s.w, g, carrier_from_frequency(s.fy(), s.fx(), s.h, s.w, g), Order::plus1);
  CHECK(dm.clipped());
  const auto w = log::warnings();
  REQUIRE(w.size() == 1);
  CHECK(w[0].find("spectrum edge") != std::string::npos);
  // Dropped bins carry zero weight in the mask.
  const auto m = dm.mask();
  for (std::size_t i = 0; i < m.height(); ++i) {
    const long ky = dm.center_ky() + fft::signed_bin(i, m.height());
    if (ky >= static_cast<long>(s.h / 2))
      for (std::size_t j = 0; j < m.width(); ++j) REQUIRE(m(i, j) == 0.0f);
  }
}

TEST_CASE("bad demodulation settings are configuration errors") {
  const Scene s;
  const Grid g = s.grid();
  const Carrier c = carrier_from_frequency(s.fy(), s.fx(), s.h, s.w, g);
  DemodulatorOptions o;
  CHECK(construct_error(s.h, s.w, g, Carrier{}, o) == ErrorKind::config); // carrier at DC
  // 3 bins from DC: inside the default exclusion (1/8 of Nyquist = 16 bins).
  CHECK(construct_error(s.h, s.w, g, carrier_from_frequency(3.0 / (s.h * s.dy), 0, s.h, s.w, g), o) ==
        ErrorKind::config);
  o.radius = -1.0;
  CHECK(construct_error(s.h, s.w, g, c, o) == ErrorKind::config);
  o = {};
  o.radius_fraction = 0.0;
  CHECK(construct_error(s.h, s.w, g, c, o) == ErrorKind::config);
  o = {};
  o.soft_edge = -0.1;
  CHECK(construct_error(s.h, s.w, g, c, o) == ErrorKind::config);
  o = {};
  o.numerical_aperture = 0.3;
  Grid no_wavelength = g;
  no_wavelength.wavelength = 0;
  CHECK(construct_error(s.h, s.w, no_wavelength, c, o) == ErrorKind::config);
  CHECK(construct_error(0, s.w, g, c, {}) == ErrorKind::config);
}

TEST_CASE("apply checks sizes, accepts strided input and does not allocate") {
  // Plan-time sizing (DESIGN.md: a stage runs on one frame without
  // allocating in steady state) [common practice].
  const Scene s{300, 480, 0.2e-6, 0.2e-6, 51.37, 110.59};
  const Grid g = s.grid();
  const Demodulator dm(s.h, s.w, g, carrier_from_frequency(s.fy(), s.fx(), s.h, s.w, g), Order::plus1);
  const Image<float> holo = s.hologram(true);
  auto ws = dm.make_workspace();
  Image<cfloat> out(dm.crop_height(), dm.crop_width()), out2(dm.crop_height(), dm.crop_width());
  dm.apply(holo.view(), out.view(), ws); // warm-up

  const void* p_in = ws.input.data();
  const void* p_spec = ws.spectrum.data();
  const void* p_crop = ws.crop.data();
  const long before = g_new_calls.load();
  dm.apply(holo.view(), out.view(), ws);
  const long after = g_new_calls.load();
  if (g_counting_new) {
    CHECK(after == before);
    // The counter is live: an ordinary heap allocation is seen.
    static volatile double sink = 0;
    std::vector<double> probe(1000, 1.0);
    sink = probe[7];
    CHECK(sink == 1.0);
    CHECK(g_new_calls.load() > after);
  }
  CHECK(ws.input.data() == p_in);
  CHECK(ws.spectrum.data() == p_spec);
  CHECK(ws.crop.data() == p_crop);

  // Strided (and therefore copied) input gives the same field.
  Image<float> big(s.h + 3, s.w + 5, 0.0f);
  for (std::size_t y = 0; y < s.h; ++y)
    for (std::size_t x = 0; x < s.w; ++x) big(y + 1, x + 2) = holo(y, x);
  dm.apply(big.view().sub(1, 2, s.h, s.w), out2.view(), ws);
  double worst = 0;
  for (std::size_t i = 0; i < out.size(); ++i)
    worst = std::max(worst, static_cast<double>(std::abs(out.data()[i] - out2.data()[i])));
  CHECK(worst < 1e-6);

  Image<float> wrong(s.h, s.w - 1, 1.0f);
  CHECK_THROWS_AS(dm.apply(wrong.view(), out.view(), ws), Error);
  Image<cfloat> wrong_out(dm.crop_height() + 1, dm.crop_width());
  try {
    dm.apply(holo.view(), wrong_out.view(), ws);
    FAIL("no error for a wrong output size");
  } catch (const Error& e) {
    CHECK(e.kind() == ErrorKind::input);
  }
}

TEST_CASE("the gathered lobe matches numpy.fft.fft2 of the same hologram") {
  // Outside reference: numpy.fft.fft2 (same sign as FFTW_FORWARD, FFTW manual
  // / NumPy docs [confirmed in REFERENCES.md]) through
  // tests/sideband/reference_fft2.py. The crop must hold mask·S(k)/(h·w) at
  // k = centre + signed offset, negative column frequencies coming from the
  // Hermitian mirror of the r2c half. The carrier is nearly vertical so the
  // +1 mask straddles kx = 0 and both gather paths are used.
  // Tolerance: 1e-5 of the largest |S|/(h·w); float32 FFT rounding is ~1e-6.
  struct Case { std::size_t h, w; double ky, kx; };
  const Case cases[] = {{24, 30, 7.3, 1.6}, {23, 29, -6.6, 1.3}};
  for (const Case& cs : cases) {
    for (Order order : {Order::plus1, Order::minus1}) {
      CAPTURE(cs.h, cs.w, to_string(order));
      Scene s;
      s.h = cs.h, s.w = cs.w, s.dy = s.dx = 1e-6, s.ky = cs.ky, s.kx = cs.kx;
      Image<float> holo = s.hologram(true);
      std::uint32_t state = 99;
      for (float& v : holo) { // a little noise so every bin is non-trivial
        state = state * 1664525u + 1013904223u;
        v += 0.05f * (static_cast<float>(state >> 8) / static_cast<float>(1 << 24) - 0.5f);
      }
      const auto ref = sideband_test::numpy_fft2(std::vector<double>(holo.begin(), holo.end()), s.h, s.w);
      REQUIRE(ref.size() == s.h * s.w);
      const Grid g = s.grid();
      const Demodulator dm(s.h, s.w, g, carrier_from_frequency(s.fy(), s.fx(), s.h, s.w, g), order);
      auto ws = dm.make_workspace();
      dm.gather(holo.view(), ws);
      double scale = 0;
      for (const auto& v : ref) scale = std::max(scale, std::abs(v));
      scale /= static_cast<double>(s.h * s.w);
      const auto m = dm.mask();
      std::size_t used = 0, negative_kx = 0;
      double worst = 0;
      for (std::size_t i = 0; i < dm.crop_height(); ++i)
        for (std::size_t j = 0; j < dm.crop_width(); ++j) {
          const long ky = dm.center_ky() + fft::signed_bin(i, dm.crop_height());
          const long kx = dm.center_kx() + fft::signed_bin(j, dm.crop_width());
          const std::complex<double> expect =
              static_cast<double>(m(i, j)) * ref[fft::bin_of(ky, s.h) * s.w + fft::bin_of(kx, s.w)] /
              static_cast<double>(s.h * s.w);
          const std::complex<double> got(ws.crop(i, j).real(), ws.crop(i, j).imag());
          worst = std::max(worst, std::abs(got - expect));
          if (m(i, j) > 0) {
            ++used;
            if (kx < 0) ++negative_kx;
          }
        }
      CHECK(used > 10);
      CHECK(negative_kx > 0);
      CHECK(negative_kx < used);
      CHECK(worst < 1e-5 * scale);
    }
  }
}
