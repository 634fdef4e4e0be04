// c2c and r2c transforms against numpy.fft, normalisation, Parseval.
#include "python_reference.hpp"

#include "wavestack/fft/fft.hpp"

#include "wavestack/core/error.hpp"

#include <catch2/catch.hpp>
#include <tbb/task_arena.h>

#include <array>
#include <cmath>
#include <cstring>
#include <limits>
#include <random>
#include <utility>
#include <vector>

using namespace wavestack;
using namespace fft_test;

namespace {

// Even, odd, prime and degenerate shapes (STYLE.md: parametrise over even,
// odd and prime sizes).
const std::vector<std::pair<std::size_t, std::size_t>> shapes = {
    {64, 64}, {45, 81}, {31, 17}, {1, 13}, {10, 1}, {96, 50}};

Image<cfloat> random_complex(std::size_t h, std::size_t w, unsigned seed) {
  std::mt19937 rng(seed);
  std::uniform_real_distribution<float> u(-1.f, 1.f);
  Image<cfloat> a(h, w);
  for (auto& v : a) v = {u(rng), u(rng)};
  return a;
}

Image<float> random_real(std::size_t h, std::size_t w, unsigned seed) {
  std::mt19937 rng(seed);
  std::uniform_real_distribution<float> u(-1.f, 1.f);
  Image<float> a(h, w);
  for (auto& v : a) v = u(rng);
  return a;
}

/// ||got - ref||_2 / ||ref||_2, accumulated in double.
double rel_l2(const cfloat* got, const std::vector<std::complex<double>>& ref) {
  double num = 0, den = 0;
  for (std::size_t i = 0; i < ref.size(); ++i) {
    num += std::norm(std::complex<double>(got[i]) - ref[i]);
    den += std::norm(ref[i]);
  }
  return std::sqrt(num / den);
}

std::string shape_name(std::size_t h, std::size_t w) { return std::to_string(h) + "x" + std::to_string(w); }

/// numpy's answer for a c2c transform of `in`.
std::vector<std::complex<double>> numpy_c2c(const Image<cfloat>& in, const char* direction) {
  const std::string tag = shape_name(in.height(), in.width()) + direction;
  TempFiles tmp{{temp_path("c2c_in_" + tag), temp_path("c2c_out_" + tag)}};
  write_raw(tmp.paths[0], in.data(), in.size());
  const std::string args = std::string("c2c ") + shell_quoted(tmp.paths[0]) + " " + shell_quoted(tmp.paths[1]) + " " +
                           std::to_string(in.height()) + " " + std::to_string(in.width()) + " " + direction;
  REQUIRE(run_reference(args) == 0);
  auto ref = read_raw<std::complex<double>>(tmp.paths[1], in.size());
  REQUIRE(ref.size() == in.size());
  return ref;
}

// Tolerance for float32 transforms: the rounding error of a radix FFT grows
// like log2(n)·u in the relative 2-norm (Higham, Accuracy and Stability of
// Numerical Algorithms, 2nd ed. (2002), Sec. 24.1, Thm 24.2 [from memory]),
// u = 6e-8 for float32; for n <= 8192 points that is below ~1e-6, so 1e-5
// leaves a margin of 10 and still catches any wrong sign, scale or layout
// (those give errors of order 1).
constexpr double fft_tol = 1e-5;

} // namespace

TEST_CASE("c2c forward matches numpy.fft.fft2 (out-of-place and in-place)") {
  for (auto [h, w] : shapes) {
    INFO("shape " << shape_name(h, w));
    const Image<cfloat> x = random_complex(h, w, static_cast<unsigned>(h * 1000 + w));
    // numpy.fft.fft2: A_kl = sum x_mn exp(-2πi(mk/h + nl/w)), unnormalised;
    // same sign and layout as FFTW_FORWARD (REFERENCES.md Conventions, FFTW
    // manual [confirmed]; numpy [from memory], checked here).
    const auto ref = numpy_c2c(x, "forward");

    Image<cfloat> out(h, w);
    const Image<cfloat> before = x;
    fft::plan_c2c(h, w, fft::Direction::forward)->execute(x.data(), out.data());
    CHECK(rel_l2(out.data(), ref) < fft_tol);
    // Out-of-place plans must leave their input untouched (FFTW_PRESERVE_INPUT).
    CHECK(std::memcmp(before.data(), x.data(), x.size() * sizeof(cfloat)) == 0);

    Image<cfloat> inplace = x;
    fft::plan_c2c(h, w, fft::Direction::forward, true)->execute(inplace.data(), inplace.data());
    CHECK(rel_l2(inplace.data(), ref) < fft_tol);
  }
}

TEST_CASE("c2c backward matches numpy.fft.ifft2 times h*w (unnormalised)") {
  for (auto [h, w] : shapes) {
    INFO("shape " << shape_name(h, w));
    const Image<cfloat> x = random_complex(h, w, static_cast<unsigned>(h * 7919 + w));
    // numpy.fft.ifft2 = (1/(h w)) sum X exp(+2πi ...); FFTW_BACKWARD is the
    // same sum without the 1/(h w) (FFTW manual, "What FFTW Really Computes"
    // [confirmed]), so the reference is ifft2(x)·h·w.
    const auto ref = numpy_c2c(x, "backward");

    Image<cfloat> out(h, w);
    fft::plan_c2c(h, w, fft::Direction::backward)->execute(x.data(), out.data());
    CHECK(rel_l2(out.data(), ref) < fft_tol);

    Image<cfloat> inplace = x;
    fft::plan_c2c(h, w, fft::Direction::backward, true)->execute(inplace.data(), inplace.data());
    CHECK(rel_l2(inplace.data(), ref) < fft_tol);
  }
}

TEST_CASE("r2c matches numpy.fft.rfft2 and leaves its input unchanged") {
  for (auto [h, w] : shapes) {
    INFO("shape " << shape_name(h, w));
    const Image<float> x = random_real(h, w, static_cast<unsigned>(h * 31 + w));
    const std::string tag = shape_name(h, w);
    TempFiles tmp{{temp_path("r2c_in_" + tag), temp_path("r2c_out_" + tag)}};
    write_raw(tmp.paths[0], x.data(), x.size());
    REQUIRE(run_reference(std::string("r2c ") + shell_quoted(tmp.paths[0]) + " " + shell_quoted(tmp.paths[1]) + " " + std::to_string(h) +
                          " " + std::to_string(w)) == 0);
    const std::size_t sw = w / 2 + 1;
    const auto ref = read_raw<std::complex<double>>(tmp.paths[1], h * sw);
    REQUIRE(ref.size() == h * sw);

    auto plan = fft::plan_r2c(h, w);
    CHECK(plan->spectrum_width() == sw);
    Image<float> in = x;
    Image<cfloat> out(h, sw);
    plan->execute(in.data(), out.data());
    // numpy.fft.rfft2: the h x (w//2+1) non-negative-column-frequency half of
    // fft2 of a real array, same layout as FFTW r2c (FFTW manual, "Multi-
    // Dimensional DFTs of Real Data" [confirmed]).
    CHECK(rel_l2(out.data(), ref) < fft_tol);
    // The wrapper promises an unchanged input; 2-D out-of-place r2c could
    // otherwise scribble on it.
    CHECK(std::memcmp(in.data(), x.data(), x.size() * sizeof(float)) == 0);
  }
}

TEST_CASE("forward then backward multiplies by h*w and Parseval holds with the unnormalised convention") {
  for (auto [h, w] : shapes) {
    INFO("shape " << shape_name(h, w));
    const Image<cfloat> x = random_complex(h, w, static_cast<unsigned>(h + 17 * w));
    Image<cfloat> spec(h, w), back(h, w);
    fft::plan_c2c(h, w, fft::Direction::forward)->execute(x.data(), spec.data());
    fft::plan_c2c(h, w, fft::Direction::backward)->execute(spec.data(), back.data());
    const double n = static_cast<double>(h * w);

    // Parseval for the unnormalised DFT: sum |X_k|^2 = N sum |x_n|^2
    // (Oppenheim & Schafer, Discrete-Time Signal Processing, DFT properties
    // [confirmed; citation from memory]). Same 1e-5 float32 tolerance.
    double ex = 0, eX = 0;
    for (std::size_t i = 0; i < x.size(); ++i) {
      ex += std::norm(std::complex<double>(x.data()[i]));
      eX += std::norm(std::complex<double>(spec.data()[i]));
    }
    CHECK(std::abs(eX / (n * ex) - 1.0) < fft_tol);

    // FFTW: backward(forward(x)) = N x (FFTW manual [confirmed]).
    std::vector<std::complex<double>> expect(x.size());
    for (std::size_t i = 0; i < x.size(); ++i) expect[i] = n * std::complex<double>(x.data()[i]);
    CHECK(rel_l2(back.data(), expect) < fft_tol);
  }
}

TEST_CASE("a unit impulse at (1,0) transforms to exp(-2πi k/h) down the columns") {
  // Direct check of the forward sign on one bin, independent of numpy:
  // X_kl = exp(-2πi k·1/h) for x = δ(m-1, n) (FFTW manual [confirmed]).
  const std::size_t h = 12, w = 5;
  Image<cfloat> x(h, w, cfloat{0, 0}), out(h, w);
  x(1, 0) = 1.0f;
  fft::plan_c2c(h, w, fft::Direction::forward)->execute(x.data(), out.data());
  for (std::size_t k = 0; k < h; ++k)
    for (std::size_t l = 0; l < w; ++l) {
      const double a = -2.0 * M_PI * static_cast<double>(k) / static_cast<double>(h);
      // 1e-6: a single float32 twiddle factor, rounding ~1e-7.
      CHECK(std::abs(std::complex<double>(out(k, l)) - std::polar(1.0, a)) < 1e-6);
    }
}

// --- padded transform (row pass over the data rows, then column pass) -------

namespace {

/// h×w with random values in the first `rows` rows and NaN below: the
/// padded plan must not read those rows (a NaN read anywhere spreads into
/// every output bin of its column).
Image<cfloat> rows_then_nan(std::size_t h, std::size_t w, std::size_t rows, unsigned seed) {
  Image<cfloat> x = random_complex(h, w, seed);
  const float nan = std::numeric_limits<float>::quiet_NaN();
  for (std::size_t y = rows; y < h; ++y)
    for (std::size_t c = 0; c < w; ++c) x(y, c) = cfloat(nan, nan);
  return x;
}

/// The same array with zeros instead of NaN: what the padded plan transforms.
Image<cfloat> zero_padded(const Image<cfloat>& x, std::size_t rows) {
  Image<cfloat> z(x.height(), x.width(), cfloat(0.0f, 0.0f));
  for (std::size_t y = 0; y < rows; ++y)
    for (std::size_t c = 0; c < x.width(); ++c) z(y, c) = x(y, c);
  return z;
}

// Shapes with and without padding rows and with short last blocks of rows
// and of columns (blocks are PaddedC2C::block = 32 lines): h, w, data rows.
const std::vector<std::array<std::size_t, 3>> padded_shapes = {
    {64, 64, 64}, {100, 90, 67}, {45, 81, 45}, {31, 17, 20}, {1, 13, 1}, {10, 1, 7}, {96, 50, 33}, {130, 66, 97}};

} // namespace

TEST_CASE("padded c2c matches numpy.fft.fft2 / ifft2 of the zero-padded array and never reads the padding rows") {
  for (const auto& [h, w, rows] : padded_shapes) {
    INFO("shape " << shape_name(h, w) << ", data rows " << rows);
    const Image<cfloat> x = rows_then_nan(h, w, rows, static_cast<unsigned>(h * 131 + w + rows));
    const Image<cfloat> z = zero_padded(x, rows);
    for (const auto dir : {fft::Direction::forward, fft::Direction::backward}) {
      // numpy.fft.fft2 / ifft2·h·w of the array with zero rows below the
      // data (numpy [from memory], conventions checked above).
      const auto ref = numpy_c2c(z, dir == fft::Direction::forward ? "forward" : "backward");
      const Image<cfloat> before = x;
      Image<cfloat> out(h, w, cfloat(7.0f, 7.0f)); // not zero: the plan must write every bin
      fft::plan_padded_c2c(h, w, rows, dir)->execute(x.data(), out.data());
      CHECK(rel_l2(out.data(), ref) < fft_tol);
      // Input untouched, NaN rows included (memcmp: NaN != NaN).
      CHECK(std::memcmp(before.data(), x.data(), x.size() * sizeof(cfloat)) == 0);
    }
  }
}

TEST_CASE("padded c2c gives the same bits on one and on two threads") {
  // Each block of lines is one FFTW execution of the same plan whichever
  // thread runs it (new-array execute, FFTW manual "New-array Execute
  // Functions" [confirmed]), so the split over threads cannot change a bit.
  for (const auto& [h, w, rows] : padded_shapes) {
    INFO("shape " << shape_name(h, w) << ", data rows " << rows);
    const Image<cfloat> x = rows_then_nan(h, w, rows, static_cast<unsigned>(h + 3 * w + rows));
    const auto plan = fft::plan_padded_c2c(h, w, rows, fft::Direction::forward);
    Image<cfloat> one(h, w), two(h, w);
    tbb::task_arena(1).execute([&] { plan->execute(x.data(), one.data()); });
    tbb::task_arena(2).execute([&] { plan->execute(x.data(), two.data()); });
    CHECK(std::memcmp(one.data(), two.data(), one.size() * sizeof(cfloat)) == 0);
  }
}

TEST_CASE("padded c2c plans are cached and refuse bad arguments") {
  const auto a = fft::plan_padded_c2c(40, 24, 30, fft::Direction::forward);
  CHECK(a == fft::plan_padded_c2c(40, 24, 30, fft::Direction::forward));
  CHECK(a != fft::plan_padded_c2c(40, 24, 31, fft::Direction::forward));
  CHECK(a->rows() == 30);
  CHECK_THROWS_AS(fft::plan_padded_c2c(40, 24, 0, fft::Direction::forward), Error);
  CHECK_THROWS_AS(fft::plan_padded_c2c(40, 24, 41, fft::Direction::forward), Error);
  Image<cfloat> in(40, 24, cfloat(0.0f, 0.0f)), out(40, 24);
  CHECK_THROWS_AS(a->execute(in.data() + 1, out.data()), Error);   // misaligned
  CHECK_THROWS_AS(a->execute(in.data(), in.data()), Error);        // same array
  CHECK_THROWS_AS(a->execute(in.data(), in.data() + 8), Error);    // overlapping (aligned, 64 bytes apart)
}
