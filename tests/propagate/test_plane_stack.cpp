// Z-stacks: one forward FFT then S planes; equality with single-plane
// propagation, the shared transfer-function cache, threads, refusals.
#include "propagate_test_util.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/propagate/plane_stack.hpp"
#include "wavestack/propagate/propagator.hpp"

#include <catch2/catch.hpp>

#include <cstring>
#include <thread>
#include <vector>

using namespace wavestack;
using namespace propagate_test;
using namespace wavestack::propagate;

namespace {

constexpr double hene = 0.6328e-6;

bool same(ImageView<const cfloat> a, ImageView<const cfloat> b) {
  if (a.height() != b.height() || a.width() != b.width()) return false;
  for (std::size_t y = 0; y < a.height(); ++y)
    if (std::memcmp(a.row(y), b.row(y), a.width() * sizeof(cfloat)) != 0) return false;
  return true;
}

const std::vector<double> planes = {-12e-6, -3e-6, 0.0, 5e-6, 20e-6};

} // namespace

TEST_CASE("every plane of a stack equals the single-plane propagation bit for bit") {
  // Same plans, same cached transfer function, same products (the stack
  // writes exact zeros outside the support, where the single-plane product
  // gives ±0: the same sums). The z = 0 plane goes through H(0)
  // (evanescent part removed) where the single-plane propagator copies:
  // also 1e-6 for a field whose band propagates. Planes are visited in an
  // order where the transfer function's support (band limit) grows and
  // shrinks, so the zeros kept in the product buffer are re-checked.
  const Grid g = grid_of(0.5e-6, 0.4e-6, hene, 1.333);
  for (Method m : {Method::angular_spectrum, Method::fresnel}) {
    INFO(method_name(m));
    PropagatorOptions o;
    o.method = m;
    o.max_frequency = 1.5e6; // below n/λ0 = 2.1/µm: propagating
    const std::vector<double> zs = {-12e-6, -3e-6, 0.0, 5e-6, 20e-6, 60e-6};
    PlaneStack stack(48, 40, g, zs, o);
    REQUIRE(stack.planes() == zs.size());
    CHECK(stack.method() == m);
    // Auto padding resolved once, at the farthest plane.
    CHECK(stack.choice().pad_factor == Approx(auto_pad_factor(48, 40, g, 60e-6, 1.5e6)).epsilon(1e-15));
    const Image<cfloat> u = random_band_limited(48, 40, 0.5e-6, 0.4e-6, 11u, [](double fy, double fx) {
      return fx * fx + fy * fy <= 1.5e6 * 1.5e6;
    });
    auto ws = stack.make_workspace();
    stack.forward(u.view(), ws);
    PropagatorOptions single = o;
    single.padding = Padding::of(stack.choice().pad_factor);
    for (std::size_t s = 0; s < stack.planes(); ++s) {
      INFO("z = " << zs[s]);
      Image<cfloat> a(48, 40), b(48, 40);
      stack.plane(s, a.view(), ws);
      auto p = make_propagator(48, 40, g, zs[s], single);
      REQUIRE(p->padded_width() == stack.padded_width());
      auto pws = p->make_workspace();
      p->apply(u.view(), b.view(), pws);
      if (zs[s] == 0.0)
        CHECK(rel_rms(a.view(), b.view()) < 1e-6);
      else
        CHECK(same(a.view(), b.view()));
      CHECK(stack.output_grid(s).plane == g.plane + zs[s]);
    }
    // Planes may be taken in any order and repeatedly: the spectrum is kept,
    // and the product buffer's zeros are restored when the support shrinks.
    Image<cfloat> first(48, 40), again(48, 40);
    stack.plane(2, first.view(), ws);
    for (std::size_t s : {5u, 0u, 3u, 5u, 1u}) stack.plane(s, again.view(), ws);
    stack.plane(2, again.view(), ws);
    CHECK(same(first.view(), again.view()));
    // The band limit at 60 µm (~0.75 cycles/µm) cuts inside Nyquist
    // (1.25 cycles/µm along x); at 0 nothing is cut.
    CHECK(stack.transfer_function(5)->support(0) < stack.transfer_function(2)->support(0));
  }
}

TEST_CASE("transfer functions are shared through the cache") {
  clear_transfer_cache();
  const Grid g = grid_of(0.5e-6, 0.5e-6, hene, 1.333);
  PropagatorOptions o;
  o.padding = Padding::of(2);
  PlaneStack a(40, 40, g, planes, o), b(40, 40, g, planes, o);
  for (std::size_t s = 0; s < planes.size(); ++s) CHECK(a.transfer_function(s).get() == b.transfer_function(s).get());
  // A single-plane propagator at one of the distances shares it too, even on
  // a grid with another plane (the axial position does not enter H).
  Grid moved = g;
  moved.plane = 7e-6;
  o.method = Method::angular_spectrum;
  auto p = make_propagator(40, 40, moved, 5e-6, o);
  CHECK(dynamic_cast<TransferPropagator&>(*p).transfer_function().get() == a.transfer_function(3).get());
  // Another wavelength, padding or method is another table.
  o.method = Method::fresnel;
  auto q = make_propagator(40, 40, g, 5e-6, o);
  CHECK(dynamic_cast<TransferPropagator&>(*q).transfer_function().get() != a.transfer_function(3).get());
  const TransferCacheStats st = transfer_cache_stats();
  CHECK(st.misses == planes.size() + 1);
  CHECK(st.hits == planes.size() + 1);
  CHECK(st.live == planes.size() + 1);
  CHECK(st.retained_bytes <= transfer_cache_budget());
  // The stored quarter mirrors to the full table: H(ky, kx) = H(ph-ky, pw-kx).
  const auto& tf = *a.transfer_function(4);
  const Image<cfloat> full = tf.full();
  CHECK(full(3, 5) == full(tf.padded_height() - 3, tf.padded_width() - 5));
  CHECK(tf.bytes() == (tf.padded_height() / 2 + 1) * (tf.padded_width() / 2 + 1) * sizeof(cfloat));
}

TEST_CASE("the cache keeps released tables up to its byte budget, least recently used first") {
  clear_transfer_cache();
  const std::size_t old_budget = transfer_cache_budget();
  const Grid g = grid_of(1e-6, 1e-6, hene);
  const std::size_t one = TransferFunction(TransferKind::angular_spectrum, 64, 64, g, 1e-6).bytes();
  set_transfer_cache_budget(2 * one); // room for two released tables
  for (double z : {1e-6, 2e-6, 3e-6}) cached_transfer(TransferKind::angular_spectrum, 64, 64, g, z); // released at once
  TransferCacheStats st = transfer_cache_stats();
  CHECK(st.retained == 2);
  CHECK(st.retained_bytes == 2 * one);
  CHECK(st.live == 2); // the table at 1 µm, least recently used, is gone
  cached_transfer(TransferKind::angular_spectrum, 64, 64, g, 3e-6); // still there: a hit
  CHECK(transfer_cache_stats().hits == 1);
  cached_transfer(TransferKind::angular_spectrum, 64, 64, g, 1e-6); // made again
  CHECK(transfer_cache_stats().misses == 4);
  // Tables in use are never dropped, whatever the budget.
  set_transfer_cache_budget(0);
  auto held = cached_transfer(TransferKind::angular_spectrum, 64, 64, g, 9e-6);
  st = transfer_cache_stats();
  CHECK(st.retained == 0);
  CHECK(st.live == 1);
  CHECK(cached_transfer(TransferKind::angular_spectrum, 64, 64, g, 9e-6).get() == held.get());
  set_transfer_cache_budget(old_budget);
}

TEST_CASE("planes computed by two threads from one shared spectrum equal the serial ones") {
  const Grid g = grid_of(0.5e-6, 0.5e-6, hene, 1.333);
  std::vector<double> zs;
  for (int i = -6; i <= 6; ++i) zs.push_back(i * 2e-6);
  PlaneStack stack(36, 44, g, zs);
  const Image<cfloat> u = random_band_limited(36, 44, 0.5e-6, 0.5e-6, 3u, [](double, double) { return true; });
  auto ws0 = stack.make_workspace();
  Image<cfloat> spectrum = stack.make_spectrum();
  stack.forward(u.view(), spectrum, ws0);
  std::vector<Image<cfloat>> serial, parallel;
  for (std::size_t s = 0; s < zs.size(); ++s) {
    serial.emplace_back(36, 44);
    parallel.emplace_back(36, 44);
    stack.plane(s, spectrum, serial[s].view(), ws0);
  }
  std::vector<std::thread> pool;
  for (std::size_t t = 0; t < 2; ++t)
    pool.emplace_back([&, t] {
      auto ws = stack.make_workspace();
      for (std::size_t s = t; s < zs.size(); s += 2) stack.plane(s, spectrum, parallel[s].view(), ws);
    });
  for (auto& th : pool) th.join();
  for (std::size_t s = 0; s < zs.size(); ++s) CHECK(same(serial[s].view(), parallel[s].view()));
}

TEST_CASE("single-FFT Fresnel serves a stack of one plane only") {
  const Grid g = grid_of(3.45e-6, 3.45e-6, hene);
  PropagatorOptions o;
  o.method = Method::fresnel_single_fft;
  o.max_frequency = 0.02e6;
  CHECK_THROWS_WITH(PlaneStack(64, 64, g, {50e-3, 60e-3}, o),
                    Catch::Contains("cannot serve a stack") && Catch::Contains("output pitch"));
  try {
    PlaneStack(64, 64, g, {50e-3, 60e-3}, o);
  } catch (const Error& e) {
    CHECK(e.kind() == ErrorKind::config);
  }
  CHECK_THROWS_AS(PlaneStack(64, 64, g, {}, o), Error);
  // One plane: the same as the single-plane propagator, on its output grid.
  PlaneStack one(64, 64, g, {50e-3}, o);
  auto p = make_propagator(64, 64, g, 50e-3, o);
  REQUIRE(one.out_width() == p->out_width());
  CHECK(one.output_grid(0).dx == p->output_grid().dx);
  const Image<cfloat> u = random_band_limited(64, 64, 3.45e-6, 3.45e-6, 9u, [](double, double) { return true; });
  Image<cfloat> a(one.out_height(), one.out_width()), b(p->out_height(), p->out_width());
  auto ws = one.make_workspace();
  one.forward(u.view(), ws);
  one.plane(0, a.view(), ws);
  auto pws = p->make_workspace();
  p->apply(u.view(), b.view(), pws);
  CHECK(same(a.view(), b.view()));
}

TEST_CASE("an auto stack beyond the critical distance stays with the angular spectrum and warns once") {
  // Single-FFT cannot serve a stack, so `auto` keeps the band-limited angular
  // spectrum and says what it costs (bandwidth kept at the farthest plane).
  log::clear_warnings();
  const Grid g = grid_of(3.45e-6, 3.45e-6, hene);
  PlaneStack far(64, 64, g, {10e-3, 50e-3, 100e-3});
  CHECK(far.method() == Method::angular_spectrum);
  CHECK(far.choice().auto_out_of_range);
  CHECK_FALSE(far.choice().explicit_out_of_range);
  CHECK(far.choice().bandwidth_kept < 0.1);
  CHECK_THAT(far.choice().reason, Catch::Contains("3 planes") && Catch::Contains("100 mm") &&
                                      Catch::Contains("cannot serve a stack") && Catch::Contains("keeps"));
  PlaneStack again(64, 64, g, {10e-3, 50e-3, 100e-3});
  std::size_t n = 0;
  CHECK(warned("plane stack", &n));
  CHECK(n == 1);
  // Near planes: in range, no warning.
  log::clear_warnings();
  PlaneStack near(64, 64, g, {-1e-3, 1e-3});
  CHECK_FALSE(near.choice().auto_out_of_range);
  CHECK(log::warnings().empty());
}

TEST_CASE("multiply_support keeps a product buffer exact across supports that grow and shrink") {
  // Against the plain full multiply, for transfer functions whose band limit
  // (support) differs: 64×50 padded grid, 1 µm, z from 0 to 400 µm.
  const Grid g = grid_of(1e-6, 1e-6, hene);
  const std::size_t ph = 64, pw = 50;
  const Image<cfloat> s = random_band_limited(ph, pw, 1e-6, 1e-6, 4u, [](double, double) { return true; });
  Image<cfloat> kept(ph, pw, cfloat(0, 0)), full(ph, pw);
  std::vector<std::uint32_t> written(ph, 0);
  std::size_t distinct = 0, last = 0;
  for (double z : {0.0, 400e-6, 50e-6, 200e-6, 0.0, 400e-6}) {
    for (TransferKind k : {TransferKind::angular_spectrum, TransferKind::fresnel}) {
      TransferFunction tf(k, ph, pw, g, z);
      tf.multiply_support(s.data(), kept.data(), written.data());
      tf.multiply(s.data(), full.data());
      CHECK(rel_rms(kept.view(), full.view()) == 0.0);
      if (tf.support(0) != last) ++distinct;
      last = tf.support(0);
    }
  }
  CHECK(distinct >= 3); // the supports really changed
}
