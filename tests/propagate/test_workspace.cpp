// Workspaces: no allocation in apply, thread safety, aliasing, strided
// views, spectrum reuse, and sharing a workspace between propagators.
#include "propagate_test_util.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/propagate/angular_spectrum.hpp"
#include "wavestack/propagate/plane_stack.hpp"
#include "wavestack/propagate/propagator.hpp"

#include <catch2/catch.hpp>

#include <atomic>
#include <cstdlib>
#include <cstring>
#include <new>
#include <thread>
#include <vector>

#include "count_allocations.hpp"
using wavestack_test::new_calls;

using namespace wavestack;
using namespace propagate_test;
using propagate::AngularSpectrum;

namespace {

Grid grid() {
  Grid g;
  g.dy = 0.5e-6;
  g.dx = 0.4e-6;
  g.wavelength = 0.6328e-6;
  g.medium_index = 1.333;
  return g;
}

Image<cfloat> field(std::size_t h, std::size_t w, unsigned seed) {
  return random_band_limited(h, w, 0.5e-6, 0.4e-6, seed, [](double, double) { return true; });
}

bool same(ImageView<const cfloat> a, ImageView<const cfloat> b) {
  if (a.height() != b.height() || a.width() != b.width()) return false;
  for (std::size_t y = 0; y < a.height(); ++y)
    if (std::memcmp(a.row(y), b.row(y), a.width() * sizeof(cfloat)) != 0) return false;
  return true;
}

} // namespace

TEST_CASE("apply reuses the workspace buffers and allocates nothing") {
  AngularSpectrum as(45, 64, grid(), 12e-6);
  auto ws = as.make_workspace();
  const cfloat* padded = ws.padded.data();
  const cfloat* spectrum = ws.spectrum.data();
  const Image<cfloat> u = field(45, 64, 1);
  Image<cfloat> out(45, 64), first(45, 64);
  as.apply(u.view(), first.view(), ws);
  const std::size_t before = new_calls;
  for (int i = 0; i < 5; ++i) as.apply(u.view(), out.view(), ws);
  CHECK(new_calls == before);
  CHECK(ws.padded.data() == padded);
  CHECK(ws.spectrum.data() == spectrum);
  CHECK(ws.padded.height() == as.padded_height());
  CHECK(ws.spectrum.width() == as.padded_width());
  // Repeated calls give the same answer: the zero padding survives each call.
  CHECK(same(out.view(), first.view()));
  for (std::size_t y = 0; y < ws.padded.height(); ++y)
    for (std::size_t x = 0; x < ws.padded.width(); ++x)
      if (y >= 45 || x >= 64) REQUIRE(ws.padded(y, x) == cfloat(0, 0));

  // Spectrum reuse allocates nothing either once the spectrum exists.
  Image<cfloat> spec = as.make_spectrum();
  const std::size_t before2 = new_calls;
  as.forward_spectrum(u.view(), spec, ws);
  as.apply_spectrum(spec, out.view(), ws);
  CHECK(new_calls == before2);
}

TEST_CASE("concurrent apply from two threads equals serial apply") {
  // Same plans, same data, same alignment: FFTW is deterministic, so the
  // results must be bit-identical (FFTW manual, "Thread safety" [confirmed]).
  AngularSpectrum as(48, 35, grid(), -20e-6);
  constexpr std::size_t jobs = 6;
  std::vector<Image<cfloat>> in, serial, parallel;
  auto ws = as.make_workspace();
  for (std::size_t j = 0; j < jobs; ++j) {
    in.push_back(field(48, 35, static_cast<unsigned>(10 + j)));
    serial.emplace_back(48, 35);
    parallel.emplace_back(48, 35);
    as.apply(in[j].view(), serial[j].view(), ws);
  }
  std::vector<std::thread> pool;
  for (std::size_t t = 0; t < 2; ++t)
    pool.emplace_back([&, t] {
      auto mine = as.make_workspace(); // one workspace per thread
      for (int rep = 0; rep < 10; ++rep)
        for (std::size_t j = t; j < jobs; j += 2) as.apply(in[j].view(), parallel[j].view(), mine);
    });
  for (auto& th : pool) th.join();
  for (std::size_t j = 0; j < jobs; ++j) CHECK(same(serial[j].view(), parallel[j].view()));
}

TEST_CASE("apply works in place and on strided views") {
  AngularSpectrum as(31, 40, grid(), 8e-6);
  auto ws = as.make_workspace();
  const Image<cfloat> u = field(31, 40, 2);
  Image<cfloat> ref(31, 40);
  as.apply(u.view(), ref.view(), ws);

  Image<cfloat> inplace = u;
  as.apply(inplace.view(), inplace.view(), ws);
  CHECK(same(inplace.view(), ref.view()));

  // Windows of larger images (stride != width) in and out.
  Image<cfloat> big_in(40, 50, cfloat(9, 9)), big_out(35, 47, cfloat(7, 7));
  for (std::size_t y = 0; y < 31; ++y)
    for (std::size_t x = 0; x < 40; ++x) big_in(y + 3, x + 5) = u(y, x);
  as.apply(big_in.view().sub(3, 5, 31, 40), big_out.view().sub(2, 4, 31, 40), ws);
  CHECK(same(big_out.view().sub(2, 4, 31, 40), ref.view()));
  CHECK(big_out(0, 0) == cfloat(7, 7)); // nothing written outside the window
  CHECK(big_out(34, 46) == cfloat(7, 7));
}

TEST_CASE("one spectrum serves several distances (focus sweep reuse)") {
  const Grid g = grid();
  const Image<cfloat> u = field(40, 36, 3);
  AngularSpectrum first(40, 36, g, 5e-6);
  auto ws = first.make_workspace();
  Image<cfloat> spec = first.make_spectrum();
  first.forward_spectrum(u.view(), spec, ws);
  for (double z : {5e-6, -3e-6, 25e-6}) {
    INFO("z = " << z);
    AngularSpectrum as(40, 36, g, z);
    Image<cfloat> a(40, 36), b(40, 36);
    as.apply(u.view(), a.view(), ws);
    as.apply_spectrum(spec, b.view(), ws);
    CHECK(same(a.view(), b.view()));
  }
  // The workspace's own spectrum buffer may be passed as the spectrum.
  AngularSpectrum as(40, 36, g, 9e-6);
  Image<cfloat> a(40, 36), b(40, 36);
  as.apply(u.view(), a.view(), ws);
  as.forward_spectrum(u.view(), ws.spectrum, ws);
  as.apply_spectrum(ws.spectrum, b.view(), ws);
  CHECK(same(a.view(), b.view()));
}

TEST_CASE("a workspace shared by propagators of different field sizes keeps correct zero padding") {
  // 40x40 and 30x30 fields that both pad to 80x80.
  const Grid g = grid();
  propagate::AngularSpectrumOptions o30;
  o30.pad_factor = 80.0 / 30.0;
  AngularSpectrum big(40, 40, g, 10e-6), small(30, 30, g, 10e-6, o30);
  REQUIRE(big.padded_height() == small.padded_height());
  REQUIRE(big.padded_width() == small.padded_width());
  const Image<cfloat> ub = field(40, 40, 4), us = field(30, 30, 5);
  auto fresh = small.make_workspace();
  Image<cfloat> ref(30, 30), got(30, 30), tmp(40, 40);
  small.apply(us.view(), ref.view(), fresh);

  auto shared = big.make_workspace();
  big.apply(ub.view(), tmp.view(), shared);  // writes a 40x40 corner
  small.apply(us.view(), got.view(), shared); // must clear rows/columns 30..39 first
  CHECK(same(got.view(), ref.view()));
  big.apply(ub.view(), tmp.view(), shared);
  small.apply(us.view(), got.view(), shared);
  CHECK(same(got.view(), ref.view()));
}

TEST_CASE("mismatched shapes and workspaces are rejected") {
  AngularSpectrum as(20, 24, grid(), 4e-6);
  AngularSpectrum other(30, 30, grid(), 4e-6);
  auto ws = as.make_workspace();
  auto wrong = other.make_workspace();
  Image<cfloat> u(20, 24, cfloat(1, 0)), out(20, 24), bad(21, 24);
  CHECK_THROWS_AS(as.apply(bad.view(), out.view(), ws), Error);
  CHECK_THROWS_AS(as.apply(u.view(), bad.view(), ws), Error);
  CHECK_THROWS_AS(as.apply(u.view(), out.view(), wrong), Error);
  Image<cfloat> spec(3, 3);
  CHECK_THROWS_AS(as.apply_spectrum(spec, out.view(), ws), Error);
  CHECK_NOTHROW(as.apply(u.view(), out.view(), ws));
}

TEST_CASE("the common interface allocates nothing per call (all methods and the plane stack)") {
  const Grid g = grid();
  const Image<cfloat> u = field(45, 64, 21);
  for (propagate::Method m : {propagate::Method::angular_spectrum, propagate::Method::fresnel,
                              propagate::Method::fresnel_single_fft}) {
    INFO(propagate::method_name(m));
    propagate::PropagatorOptions o;
    o.method = m;
    auto p = propagate::make_propagator(45, 64, g, 12e-6, o);
    auto ws = p->make_workspace();
    const cfloat* padded = ws.padded.data();
    Image<cfloat> out(p->out_height(), p->out_width()), first(p->out_height(), p->out_width());
    p->apply(u.view(), first.view(), ws);
    const std::size_t before = new_calls;
    for (int i = 0; i < 4; ++i) p->apply(u.view(), out.view(), ws);
    CHECK(new_calls == before);
    CHECK(ws.padded.data() == padded);
    CHECK(same(out.view(), first.view()));
  }
  propagate::PlaneStack stack(45, 64, g, {-5e-6, 0.0, 7e-6});
  auto ws = stack.make_workspace();
  Image<cfloat> spectrum = stack.make_spectrum(), out(45, 64);
  stack.forward(u.view(), ws);
  stack.plane(0, out.view(), ws);
  const std::size_t before = new_calls;
  for (int i = 0; i < 3; ++i) {
    stack.forward(u.view(), ws);
    for (std::size_t s = 0; s < 3; ++s) stack.plane(s, out.view(), ws);
    stack.forward(u.view(), spectrum, ws);
    stack.plane(2, spectrum, out.view(), ws);
  }
  CHECK(new_calls == before);
}

TEST_CASE("the angular spectrum of the common interface is bit-identical to AngularSpectrum and shares its workspace") {
  // Same table (same double expressions), same plans, same multiply.
  const Grid g = grid();
  for (double pad : {1.0, 2.0, 1.5}) {
    INFO("pad " << pad);
    propagate::AngularSpectrumOptions ao;
    ao.pad_factor = pad;
    AngularSpectrum as(45, 64, g, -9e-6, ao);
    propagate::PropagatorOptions o;
    o.method = propagate::Method::angular_spectrum;
    o.padding = propagate::Padding::of(pad);
    auto p = propagate::make_propagator(45, 64, g, -9e-6, o);
    REQUIRE(p->padded_height() == as.padded_height());
    REQUIRE(p->padded_width() == as.padded_width());
    const auto& tf = dynamic_cast<propagate::TransferPropagator&>(*p).transfer_function();
    CHECK(std::memcmp(tf->full().data(), as.transfer().data(), as.transfer().size() * sizeof(cfloat)) == 0);
    CHECK(tf->band_limit_fx() == as.band_limit_fx());
    const Image<cfloat> u = field(45, 64, 22);
    Image<cfloat> a(45, 64), b(45, 64);
    auto ws = as.make_workspace(); // one workspace for both
    as.apply(u.view(), a.view(), ws);
    p->apply(u.view(), b.view(), ws);
    CHECK(same(a.view(), b.view()));
  }
}

TEST_CASE("the common interface works in place and on strided views") {
  const Grid g = grid();
  const Image<cfloat> u = field(32, 40, 23);
  for (propagate::Method m : {propagate::Method::angular_spectrum, propagate::Method::fresnel,
                              propagate::Method::fresnel_single_fft}) {
    INFO(propagate::method_name(m));
    propagate::PropagatorOptions o;
    o.method = m;
    o.padding = propagate::Padding::none(); // single-FFT output = input size
    auto p = propagate::make_propagator(32, 40, g, 30e-6, o);
    REQUIRE(p->out_height() == 32);
    REQUIRE(p->out_width() == 40);
    auto ws = p->make_workspace();
    Image<cfloat> ref(32, 40);
    p->apply(u.view(), ref.view(), ws);
    Image<cfloat> inplace = u;
    p->apply(inplace.view(), inplace.view(), ws);
    CHECK(same(inplace.view(), ref.view()));
    Image<cfloat> big_in(40, 50, cfloat(9, 9)), big_out(36, 47, cfloat(7, 7));
    for (std::size_t y = 0; y < 32; ++y)
      for (std::size_t x = 0; x < 40; ++x) big_in(y + 3, x + 5) = u(y, x);
    p->apply(big_in.view().sub(3, 5, 32, 40), big_out.view().sub(2, 4, 32, 40), ws);
    CHECK(same(big_out.view().sub(2, 4, 32, 40), ref.view()));
    CHECK(big_out(0, 0) == cfloat(7, 7));
    CHECK(big_out(35, 46) == cfloat(7, 7));
    Image<cfloat> wrong(31, 40);
    CHECK_THROWS_AS(p->apply(u.view(), wrong.view(), ws), Error);
  }
}

TEST_CASE("concurrent apply of every method from two threads equals serial apply") {
  // One workspace per thread, the propagator shared (const); FFTW's
  // new-array execute is thread-safe (FFTW manual, "Thread safety"
  // [confirmed]) and deterministic for the same plan and alignment.
  const Grid g = grid();
  for (propagate::Method m : {propagate::Method::angular_spectrum, propagate::Method::fresnel,
                              propagate::Method::fresnel_single_fft}) {
    INFO(propagate::method_name(m));
    propagate::PropagatorOptions o;
    o.method = m;
    auto p = propagate::make_propagator(36, 48, g, -15e-6, o);
    constexpr std::size_t jobs = 6;
    std::vector<Image<cfloat>> in, serial, parallel;
    auto ws = p->make_workspace();
    for (std::size_t j = 0; j < jobs; ++j) {
      in.push_back(field(36, 48, static_cast<unsigned>(40 + j)));
      serial.emplace_back(p->out_height(), p->out_width());
      parallel.emplace_back(p->out_height(), p->out_width());
      p->apply(in[j].view(), serial[j].view(), ws);
    }
    std::vector<std::thread> pool;
    for (std::size_t t = 0; t < 2; ++t)
      pool.emplace_back([&, t] {
        auto mine = p->make_workspace();
        for (int rep = 0; rep < 5; ++rep)
          for (std::size_t j = t; j < jobs; j += 2) p->apply(in[j].view(), parallel[j].view(), mine);
      });
    for (auto& th : pool) th.join();
    for (std::size_t j = 0; j < jobs; ++j) CHECK(same(serial[j].view(), parallel[j].view()));
  }
}
