// Focus search: refinement accuracy, ROI, unsure verdicts (no object, peak
// at the range edge, flat curve), windows, 1 vs 2 threads, and no
// allocation per frame in steady state.
#include "focus_test_util.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/focus/search.hpp"

#include <catch2/catch.hpp>
#include <tbb/task_arena.h>

#include <algorithm>
#include <atomic>
#include <cmath>
#include <utility>
#include <cstdio>
#include <cstdlib>
#include <new>
#include <vector>

using namespace wavestack;
using namespace wavestack::focus;
using namespace focus_test;

// Counting global allocation functions: the steady-state test reads the
// counter around run() calls.
namespace {
std::atomic<long> allocations{0};
}
void* operator new(std::size_t n) {
  allocations.fetch_add(1, std::memory_order_relaxed);
  if (void* p = std::malloc(n ? n : 1)) return p;
  throw std::bad_alloc();
}
void* operator new[](std::size_t n) { return operator new(n); }
// The nothrow forms too (Catch2 uses them), so that every plain form pairs
// with free() below, also under a sanitizer's own operator new.
void* operator new(std::size_t n, const std::nothrow_t&) noexcept {
  allocations.fetch_add(1, std::memory_order_relaxed);
  return std::malloc(n ? n : 1);
}
void* operator new[](std::size_t n, const std::nothrow_t& t) noexcept { return operator new(n, t); }
void operator delete(void* p, const std::nothrow_t&) noexcept { std::free(p); }
void operator delete[](void* p, const std::nothrow_t&) noexcept { std::free(p); }
void operator delete(void* p) noexcept { std::free(p); }
void operator delete[](void* p) noexcept { std::free(p); }
void operator delete(void* p, std::size_t) noexcept { std::free(p); }
void operator delete[](void* p, std::size_t) noexcept { std::free(p); }

namespace {

constexpr std::size_t n = 128;

Object disc(Object::Kind kind, double focus, double cy = 0, double cx = 0) {
  Object o{kind};
  o.focus = focus;
  o.cy = cy;
  o.cx = cx;
  o.absorb = kind == Object::phase_disc ? 0.0 : 0.5;
  o.phase = kind == Object::amplitude_disc ? 0.0 : 1.0;
  return o;
}

} // namespace

TEST_CASE("refinement lands well below the coarse step, with 81 + 2·levels propagations") {
  // Off-grid true distances (the coarse planes are every 0.5 µm). Noise-free
  // amplitude and phase discs. Tolerance 0.05 µm = step/10: the bracket after
  // 5 levels is ±step/32 = ±0.016 µm, and the remaining error is the
  // metric's own offset from the object plane on a pupil-limited disc
  // (measured below 0.03 µm); the pass criterion of the brief (DOF/10 =
  // 0.15 µm) is looser still.
  Search s(n, n, grid(), -20e-6, 20e-6, 0.5e-6);
  SearchOptions coarse_only;
  coarse_only.refine_levels = 0;
  Search s0(n, n, grid(), -20e-6, 20e-6, 0.5e-6, coarse_only);
  auto ws = s.make_workspace();
  auto ws0 = s0.make_workspace();
  REQUIRE(s.planes() == 81);
  for (const Object::Kind k : {Object::amplitude_disc, Object::phase_disc})
    for (const double d : {-11.37e-6, 5.13e-6, 9.81e-6}) {
      const Image<cfloat> f = make_frame(n, n, {disc(k, d)});
      const FocusResult r = s.run(f, ws);
      const FocusResult r0 = s0.run(f, ws0);
      INFO("kind " << k << " at " << d * 1e6 << " um: found " << r.distance * 1e6 << ", parabola only "
                   << r0.distance * 1e6);
      REQUIRE(r.sure);
      CHECK(std::abs(r.distance - d) < 0.05e-6);
      CHECK(r.propagations == 81 + 2 * 5);
      CHECK(r0.propagations == 81);
      // A 3-point parabola on the 0.5 µm grid alone: within the DOF/10 tolerance
      // but coarser (reported in the INFO line on failure).
      REQUIRE(r0.sure);
      CHECK(std::abs(r0.distance - d) < tolerance);
      std::printf("refine: kind %d d=%+7.2f um  refined err %+.4f um  parabola-only err %+.4f um\n", k, d * 1e6,
                  (r.distance - d) * 1e6, (r0.distance - d) * 1e6);
    }
}

TEST_CASE("a frame with no object is unsure: no crash, no made-up distance") {
  // Plane wave + pupil-limited complex noise σ = 0.02 (the noise of the
  // other tests). Twenty noise realisations; the default metric, with the
  // noise split for the fields' band (3 px blocks), must call every one
  // unsure (min_snr 12; measured snr 3.4..8.2) and report distance NaN and
  // confidence 0.
  SearchOptions o;
  o.band = band;
  Search s(n, n, grid(), -20e-6, 20e-6, 0.5e-6, o);
  REQUIRE(s.options().split_tile == 3);
  auto ws = s.make_workspace();
  for (unsigned seed = 1; seed <= 20; ++seed) {
    const FocusResult r = s.run(make_frame(n, n, {}, 0.02, seed), ws);
    INFO("seed " << seed << ": " << to_string(r.reason) << ", snr " << r.snr);
    CHECK_FALSE(r.sure);
    CHECK(std::isnan(r.distance));
    CHECK(r.confidence == 0);
    CHECK(r.curve.size() == 81);
    CHECK(r.propagations == 81); // no refinement of an unsure curve
  }
}

TEST_CASE("small beads seen by one half of the noise split do not hide a clear focus") {
  // Two smooth phase bumps ("cells", 1.7 rad, 1/e radius 3 µm) and three
  // 0.25 µm phase beads (2.5 rad), all sharp at d. A bead's image is
  // smaller than a split block, so one half sees it and the other does
  // not: the halves' difference then carries the bead's own sharp curve,
  // which the noise estimate takes for noise. Blocks for the fields' band
  // (3 px) share the beads more evenly than 8 px blocks: every frame is
  // sure, with a higher snr than with 8 px blocks (measured 99..155 against
  // 23..50; the invented demo scene of `wavestack demo`, 345 nm pitch, had 9
  // of 16 frames unsure with 8 px blocks, none with 2 px). The found focus
  // is within 0.2 µm: the smooth bumps pull it by up to 0.16 µm, the bias of
  // test_default_metric.cpp's Gaussian bump.
  SearchOptions o;
  o.band = band;
  SearchOptions coarse = o;
  coarse.split_tile = 8;
  const Search s(n, n, grid(), -20e-6, 20e-6, 0.5e-6, o), s8(n, n, grid(), -20e-6, 20e-6, 0.5e-6, coarse);
  REQUIRE(s.options().split_tile == 3);
  auto ws = s.make_workspace(), ws8 = s8.make_workspace();
  unsigned seed = 40;
  for (const double d : {-12e-6, -6e-6, -2e-6, 2e-6, 6e-6, 12e-6}) {
    std::vector<Object> scene;
    for (const auto& [cy, cx] : {std::pair{-5e-6, 4e-6}, {6e-6, -5e-6}}) {
      Object cell = disc(Object::phase_gauss, d, cy, cx);
      cell.radius = 3e-6;
      cell.phase = 1.7;
      scene.push_back(cell);
    }
    for (const auto& [cy, cx] : {std::pair{5e-6, 6e-6}, {-7e-6, -6e-6}, {0.5e-6, -0.5e-6}}) {
      Object bead = disc(Object::phase_disc, d, cy, cx);
      bead.radius = 0.25e-6;
      bead.phase = 2.5;
      scene.push_back(bead);
    }
    const Image<cfloat> f = make_frame(n, n, scene, 0.02, ++seed);
    const FocusResult r = s.run(f, ws), r8 = s8.run(f, ws8);
    std::printf("cells and beads at %+5.1f um: snr %.1f (%s), with 8 px blocks %.1f (%s)\n", d * 1e6, r.snr,
                to_string(r.reason), r8.snr, to_string(r8.reason));
    INFO("scene at " << d * 1e6 << " um: " << to_string(r.reason) << ", snr " << r.snr << ", found " << r.distance * 1e6);
    REQUIRE(r.sure);
    CHECK(r.snr > r8.snr);
    CHECK(std::abs(r.distance - d) <= 0.2e-6);
  }
}

TEST_CASE("flat and invalid curves: a noise-free plane wave") {
  // |U| = 1 everywhere at every plane: the amplitude variance is 0 (flat
  // curve), the Tamura coefficient of a zero gradient is 0/0 (invalid).
  const Image<cfloat> plane(n, n, cfloat(0.6f, 0.8f));
  SearchOptions o;
  o.metric = Metric::amplitude_variance;
  Search av(n, n, grid(), -5e-6, 5e-6, 0.5e-6, o);
  auto wa = av.make_workspace();
  const FocusResult ra = av.run(plane, wa);
  CHECK_FALSE(ra.sure);
  CHECK(ra.reason == Unsure::flat);
  CHECK(std::isnan(ra.distance));
  Search tg(n, n, grid(), -5e-6, 5e-6, 0.5e-6);
  auto wt = tg.make_workspace();
  const FocusResult rt = tg.run(plane, wt);
  CHECK_FALSE(rt.sure);
  CHECK(rt.reason == Unsure::invalid);
  CHECK(std::isnan(rt.distance));
}

TEST_CASE("an object focused outside the range puts the extremum at the edge and is unsure") {
  Search s(n, n, grid(), -6e-6, 6e-6, 0.5e-6);
  auto ws = s.make_workspace();
  const FocusResult r = s.run(make_frame(n, n, {disc(Object::amplitude_disc, 12e-6)}, 0.02, 3), ws);
  CHECK_FALSE(r.sure);
  CHECK(r.reason == Unsure::edge);
  CHECK(r.peak == s.planes() - 1);
  CHECK(std::isnan(r.distance));
}

TEST_CASE("a region of interest focuses the object inside it") {
  // Two discs 12 µm apart laterally, in focus at -6 µm and +7 µm; an ROI of
  // 48x48 pixels around each finds its own (tolerance DOF/10 as above).
  const double ya = -3e-6, xa = -6e-6, yb = 3e-6, xb = 6e-6;
  const Image<cfloat> f =
      make_frame(n, n, {disc(Object::amplitude_disc, -6e-6, ya, xa), disc(Object::phase_disc, 7e-6, yb, xb)}, 0.02, 9);
  for (const auto& [cy, cx, d] : {std::tuple{ya, xa, -6e-6}, std::tuple{yb, xb, 7e-6}}) {
    SearchOptions o;
    const auto py = static_cast<std::size_t>(frame_pixel(cy, n)), px = static_cast<std::size_t>(frame_pixel(cx, n));
    o.roi = Roi{py - 24, px - 24, 48, 48};
    Search s(n, n, grid(), -20e-6, 20e-6, 0.5e-6, o);
    auto ws = s.make_workspace();
    const FocusResult r = s.run(f, ws);
    INFO("object at " << d * 1e6 << " um: found " << r.distance * 1e6 << " (" << to_string(r.reason) << ")");
    REQUIRE(r.sure);
    CHECK(std::abs(r.distance - d) <= tolerance);
  }
  SearchOptions bad;
  bad.roi = Roi{100, 100, 40, 40};
  CHECK_THROWS_AS(Search(n, n, grid(), -5e-6, 5e-6, 0.5e-6, bad), Error);
}

TEST_CASE("a window search evaluates only its planes and marks the rest NaN") {
  Search s(n, n, grid(), -20e-6, 20e-6, 0.5e-6);
  auto ws = s.make_workspace();
  const Image<cfloat> f = make_frame(n, n, {disc(Object::mixed_disc, 4.2e-6)}, 0.02, 4);
  const std::size_t c = s.nearest_plane(4e-6);
  CHECK(s.distances()[c] == Approx(4e-6));
  FocusResult r;
  s.run_window(f, c - 8, c + 8, r, ws);
  CHECK(r.first == c - 8);
  CHECK(r.last == c + 8);
  CHECK(std::isnan(r.curve[c - 9]));
  CHECK(std::isnan(r.curve[c + 9]));
  CHECK(std::isfinite(r.curve[c]));
  REQUIRE(r.sure);
  CHECK(std::abs(r.distance - 4.2e-6) <= tolerance);
  CHECK(r.propagations == 17 + 10);
  CHECK_THROWS_AS(s.run_window(f, 5, 6, r, ws), Error);
}

TEST_CASE("one and two threads give the same result, bit for bit") {
  // Each plane is computed by one task with its own buffers and the
  // refinement is sequential in its decisions, so the thread count cannot
  // change a value.
  Search s(n, n, grid(), -20e-6, 20e-6, 0.5e-6);
  const Image<cfloat> f = make_frame(n, n, {disc(Object::phase_disc, -7.3e-6)}, 0.02, 5);
  FocusResult r1, r2;
  tbb::task_arena one(1), two(2);
  one.execute([&] {
    auto ws = s.make_workspace();
    s.run(f, r1, ws);
  });
  two.execute([&] {
    auto ws = s.make_workspace();
    s.run(f, r2, ws);
  });
  REQUIRE(r1.sure);
  CHECK(r1.distance == r2.distance);
  CHECK(r1.curve == r2.curve);
}

TEST_CASE("steady-state searches allocate nothing and keep their buffers") {
  // After the first frame, run() reuses the workspace and the result's
  // vectors: the buffer addresses stay the same and no operator new happens
  // (FFTW's own scratch, if any, goes through malloc and is not counted; see
  // fft.hpp). TBB task allocation uses its own pools.
  Search s(n, n, grid(), -20e-6, 20e-6, 0.5e-6);
  auto ws = s.make_workspace();
  const Image<cfloat> a = make_frame(n, n, {disc(Object::amplitude_disc, 3e-6)}, 0.02, 6);
  const Image<cfloat> b = make_frame(n, n, {disc(Object::phase_disc, -9e-6)}, 0.02, 7);
  FocusResult r;
  s.run(a, r, ws);
  s.run(b, r, ws);
  const auto buffers = ws.buffers();
  const double* curve = r.curve.data();
  const double* dist = r.distances.data();
  const long before = allocations.load();
  for (int k = 0; k < 4; ++k) s.run(k % 2 ? a : b, r, ws);
  const long after = allocations.load();
  CHECK(after - before == 0);
  CHECK(ws.buffers() == buffers);
  CHECK(r.curve.data() == curve);
  CHECK(r.distances.data() == dist);
  CHECK(r.sure);
}

TEST_CASE("the background constant propagates with the DC phase of the transfer function") {
  // The search adds the frame mean back as b·exp(i 2π n z/λ0), the value of
  // the angular spectrum transfer function at f = 0 (REFERENCES.md
  // Propagation, exact ASM [from memory]; DC bin [derived]). Check it
  // against AngularSpectrum on a constant field (periodic, pad 1), where the
  // propagated field is exactly that constant times H(0, 0). Tolerance
  // 1e-5: float phasor rounding.
  const double z = 7.3e-6;
  propagate::AngularSpectrumOptions o;
  o.pad_factor = 1.0;
  propagate::AngularSpectrum as(32, 32, grid(), z, o);
  auto pw = as.make_workspace();
  const Image<cfloat> c(32, 32, cfloat(0.6f, -0.3f));
  Image<cfloat> out(32, 32);
  as.apply(c, out, pw);
  const std::complex<double> want =
      std::complex<double>(0.6, -0.3) * std::polar(1.0, 2 * M_PI * n_water * z / lambda0);
  CHECK(std::abs(std::complex<double>(out(5, 7)) - want) < 1e-5);
}

TEST_CASE("padded propagation with the frame mean outside finds the same focus") {
  // pad_factor 1.5 with Background::mean (the field outside the frame taken
  // as the frame mean, search.hpp step 1): a noise-free amplitude disc at
  // 6.2 µm is found within DOF/10 [common practice], like the periodic default.
  SearchOptions o;
  o.pad_factor = 1.5;
  Search s(n, n, grid(), -20e-6, 20e-6, 0.5e-6, o);
  CHECK(s.padded_height() == fft::good_size(192));
  auto ws = s.make_workspace();
  const FocusResult r = s.run(make_frame(n, n, {disc(Object::amplitude_disc, 6.2e-6)}), ws);
  INFO("found " << r.distance * 1e6 << " um (" << to_string(r.reason) << ")");
  REQUIRE(r.sure);
  CHECK(std::abs(r.distance - 6.2e-6) <= tolerance);
}

TEST_CASE("curve verdicts on hand-made curves") {
  // Rules of analyse_curve (search.hpp). Prominence as in
  // scipy.signal.peak_prominences [common practice]: for g = exp(-((i-20)/4)²)
  // + 0.001·i on 41 planes the global maximum's prominence is its height
  // above the higher side minimum (the right end, 0.04 + ~0): computed here
  // independently.
  SearchOptions o;
  std::vector<double> g(41), split(41);
  for (std::size_t i = 0; i < g.size(); ++i) {
    const double x = (static_cast<double>(i) - 20.0) / 4.0;
    g[i] = std::exp(-x * x) + 0.001 * static_cast<double>(i);
    split[i] = 1e-4 * std::sin(1.7 * static_cast<double>(i)); // "noise" of amplitude 1e-4
  }
  CurveVerdict v = analyse_curve(g, split, +1, o);
  CHECK(v.sure);
  CHECK(v.peak == 20);
  const double right_min = *std::min_element(g.begin() + 20, g.end());
  const double left_min = *std::min_element(g.begin(), g.begin() + 21);
  CHECK(v.prominence == Approx(g[20] - std::max(left_min, right_min)));
  CHECK(v.dominance == Approx(1.0).margin(0.02)); // the right end is a tiny competing maximum
  CHECK(v.confidence > 0.9);
  // Minimum sense on the same curve: the minimum is at an end.
  v = analyse_curve(g, split, -1, o);
  CHECK_FALSE(v.sure);
  CHECK(v.reason == Unsure::edge);
  // Noise at the level of the peak: unsure.
  for (auto& s : split) s *= 5000;
  v = analyse_curve(g, split, +1, o);
  CHECK(v.reason == Unsure::noise);
  // Two equal peaks: sure, but no dominance, so no confidence.
  std::vector<double> two(41);
  for (std::size_t i = 0; i < two.size(); ++i)
    two[i] = std::exp(-std::pow((static_cast<double>(i) - 12.0) / 3.0, 2)) +
             std::exp(-std::pow((static_cast<double>(i) - 28.0) / 3.0, 2)) * 0.999;
  v = analyse_curve(two, {}, +1, o);
  CHECK(v.peak == 12);
  CHECK(v.dominance < 0.01);
  CHECK(v.confidence < 0.01);
  // Flat (round-off only) and invalid curves.
  const std::vector<double> flat(41, 0.5);
  CHECK(analyse_curve(flat, {}, +1, o).reason == Unsure::flat);
  std::vector<double> bad = g;
  bad[7] = std::nan("");
  CHECK(analyse_curve(bad, {}, +1, o).reason == Unsure::invalid);
  // Depends-sense metric with automatic extremum: the clearer one wins.
  std::vector<double> dip(41);
  for (std::size_t i = 0; i < dip.size(); ++i) dip[i] = 1.0 - g[i];
  const CurveVerdict j = judge_curve(dip, {}, Metric::amplitude_variance, o);
  CHECK(j.sure);
  CHECK(j.sign == -1);
  CHECK(j.peak == 20);
}
