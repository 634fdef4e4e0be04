// Plan cache, thread safety, alignment checks, planning effort and wisdom files.
#include "python_reference.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/fft/fft.hpp"

#include <catch2/catch.hpp>

#include <cstring>
#include <fstream>
#include <random>
#include <thread>
#include <vector>

using namespace wavestack;

namespace {

Image<cfloat> random_complex(std::size_t h, std::size_t w, unsigned seed) {
  std::mt19937 rng(seed);
  std::uniform_real_distribution<float> u(-1.f, 1.f);
  Image<cfloat> a(h, w);
  for (auto& v : a) v = {u(rng), u(rng)};
  return a;
}

/// Restores the planning effort when a test leaves (tests share one process
/// when the executable runs without ctest).
struct PlanningGuard {
  fft::Planning saved = fft::planning();
  ~PlanningGuard() { fft::set_planning(saved); }
};

} // namespace

TEST_CASE("the plan cache returns the same plan object for the same key") {
  const std::size_t before = fft::cached_plans();
  auto a = fft::plan_c2c(24, 36, fft::Direction::forward);
  auto b = fft::plan_c2c(24, 36, fft::Direction::forward);
  CHECK(a.get() == b.get());
  CHECK(fft::cached_plans() == before + 1);

  // Every part of the key makes a different plan: direction, in-place, shape.
  auto c = fft::plan_c2c(24, 36, fft::Direction::backward);
  auto d = fft::plan_c2c(24, 36, fft::Direction::forward, true);
  auto e = fft::plan_c2c(36, 24, fft::Direction::forward);
  CHECK(c.get() != a.get());
  CHECK(d.get() != a.get());
  CHECK(e.get() != a.get());
  CHECK(c->direction() == fft::Direction::backward);
  CHECK(d->in_place());
  CHECK_FALSE(a->in_place());
  CHECK(e->height() == 36);
  CHECK(e->width() == 24);
  auto r1 = fft::plan_r2c(24, 36);
  auto r2 = fft::plan_r2c(24, 36);
  CHECK(r1.get() == r2.get());
  CHECK(fft::cached_plans() == before + 5);

  // The planning effort is part of the key too.
  PlanningGuard guard;
  fft::set_planning(fft::Planning::measure);
  CHECK(fft::planning() == fft::Planning::measure);
  auto m = fft::plan_c2c(24, 36, fft::Direction::forward);
  CHECK(m.get() != a.get());
  CHECK(fft::plan_c2c(24, 36, fft::Direction::forward).get() == m.get());
  CHECK(fft::cached_plans() == before + 6);
}

TEST_CASE("planning from many threads at once yields one plan per key") {
  constexpr int threads = 4;
  std::vector<std::shared_ptr<const fft::C2C>> got(threads);
  std::vector<std::thread> pool;
  for (int t = 0; t < threads; ++t)
    pool.emplace_back([&got, t] { got[t] = fft::plan_c2c(50, 42, fft::Direction::forward); });
  for (auto& th : pool) th.join();
  for (int t = 1; t < threads; ++t) CHECK(got[t].get() == got[0].get());
}

TEST_CASE("concurrent execution of one plan from several threads equals serial execution") {
  // FFTW's new-array execute is thread-safe on distinct arrays (FFTW manual,
  // "Thread safety" [confirmed]); the same plan on the same data is
  // deterministic, so results must be bit-identical, not merely close.
  for (std::size_t n : {1u, 2u}) { // 1 and 2 worker threads (STYLE.md)
    const std::size_t h = 45, w = 81, jobs = 8;
    auto plan = fft::plan_c2c(h, w, fft::Direction::forward);
    std::vector<Image<cfloat>> in, serial, parallel;
    for (std::size_t j = 0; j < jobs; ++j) {
      in.push_back(random_complex(h, w, static_cast<unsigned>(100 + j)));
      serial.emplace_back(h, w);
      parallel.emplace_back(h, w);
      plan->execute(in[j].data(), serial[j].data());
    }
    std::vector<std::thread> pool;
    for (std::size_t t = 0; t < n; ++t)
      pool.emplace_back([&, t] {
        for (int rep = 0; rep < 20; ++rep)
          for (std::size_t j = t; j < jobs; j += n) plan->execute(in[j].data(), parallel[j].data());
      });
    for (auto& th : pool) th.join();
    for (std::size_t j = 0; j < jobs; ++j) {
      INFO("threads " << n << ", job " << j);
      CHECK(std::memcmp(serial[j].data(), parallel[j].data(), h * w * sizeof(cfloat)) == 0);
    }
  }
}

TEST_CASE("execute checks alignment and in-place/out-of-place use") {
  // Image storage is 64-byte aligned, which is what plans made on fftwf_malloc
  // buffers require of new arrays (FFTW manual, "New-array Execute Functions"
  // [confirmed]: the alignment must equal that of the planning arrays).
  Image<cfloat> a(16, 16, cfloat{1, 0}), b(16, 16);
  CHECK(fft::is_aligned(a.data()));
  CHECK(fft::is_aligned(b.data()));
  CHECK_FALSE(fft::is_aligned(a.data() + 1)); // 8 bytes off: not SIMD-aligned

  auto oop = fft::plan_c2c(4, 4, fft::Direction::forward);
  auto ip = fft::plan_c2c(4, 4, fft::Direction::forward, true);
  CHECK_THROWS_AS(oop->execute(a.data() + 1, b.data()), Error);
  CHECK_THROWS_AS(oop->execute(a.data(), a.data()), Error);      // out-of-place plan, same array
  CHECK_THROWS_AS(oop->execute(a.data(), a.data() + 8), Error);  // overlapping arrays (aligned, 64 bytes apart)
  CHECK_THROWS_AS(ip->execute(a.data(), b.data()), Error);       // in-place plan, two arrays
  CHECK_NOTHROW(ip->execute(a.data(), a.data()));
  CHECK_NOTHROW(oop->execute(a.data(), b.data()));
  Image<float> r(4, 4, 0.f);
  Image<cfloat> rs(4, 3);
  CHECK_THROWS_AS(fft::plan_r2c(4, 4)->execute(r.data() + 1, rs.data()), Error);
  CHECK_THROWS_AS(fft::plan_c2c(0, 4, fft::Direction::forward), Error);
}

TEST_CASE("measured plans compute the same transform as estimated plans") {
  PlanningGuard guard;
  const std::size_t h = 60, w = 70;
  const Image<cfloat> x = random_complex(h, w, 5);
  Image<cfloat> e(h, w), m(h, w), p(h, w);
  fft::set_planning(fft::Planning::estimate);
  fft::plan_c2c(h, w, fft::Direction::forward)->execute(x.data(), e.data());
  fft::set_planning(fft::Planning::measure);
  fft::plan_c2c(h, w, fft::Direction::forward)->execute(x.data(), m.data());
  fft::set_planning(fft::Planning::patient);
  fft::plan_c2c(h, w, fft::Direction::forward)->execute(x.data(), p.data());
  // Different algorithms round differently; 1e-5 relative 2-norm is the
  // float32 FFT tolerance (see test_transforms.cpp).
  double d1 = 0, d2 = 0, s = 0;
  for (std::size_t i = 0; i < x.size(); ++i) {
    d1 += std::norm(std::complex<double>(e.data()[i]) - std::complex<double>(m.data()[i]));
    d2 += std::norm(std::complex<double>(e.data()[i]) - std::complex<double>(p.data()[i]));
    s += std::norm(std::complex<double>(e.data()[i]));
  }
  CHECK(std::sqrt(d1 / s) < 1e-5);
  CHECK(std::sqrt(d2 / s) < 1e-5);
}

TEST_CASE("wisdom files save, load, report a missing file and reject a corrupt one") {
  PlanningGuard guard;
  const std::string path = fft_test::temp_path("wisdom");
  fft_test::TempFiles tmp{{path}};
  fft::set_planning(fft::Planning::measure);
  fft::plan_c2c(40, 48, fft::Direction::forward);
  fft::save_wisdom(path);
  {
    std::ifstream f(path);
    std::string head;
    std::getline(f, head);
    // FFTW wisdom text starts with "(fftw-3.x.y fftwf_wisdom" (FFTW manual,
    // "Wisdom Utilities" [from memory]; checked by this test).
    CHECK(head.rfind("(fftw-3", 0) == 0);
    CHECK(head.find("fftwf_wisdom") != std::string::npos);
  }
  CHECK(fft::load_wisdom(path));
  CHECK_FALSE(fft::load_wisdom(path + ".does-not-exist"));

  {
    std::ofstream f(path, std::ios::trunc);
    f << "this is not wisdom\n";
  }
  try {
    fft::load_wisdom(path);
    FAIL("a corrupt wisdom file must throw");
  } catch (const Error& e) {
    CHECK(e.kind() == ErrorKind::config);
    CHECK(std::string(e.what()).find(path) != std::string::npos);
  }

  // Saving into a folder that does not exist fails with the file named.
  const std::string bad = path + ".missing-dir/wisdom";
  try {
    fft::save_wisdom(bad);
    FAIL("saving into a missing folder must throw");
  } catch (const Error& e) {
    CHECK(e.kind() == ErrorKind::output);
    CHECK(std::string(e.what()).find(bad) != std::string::npos);
  }
}
