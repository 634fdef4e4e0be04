// c2c and r2c transforms against numpy.fft, normalisation, Parseval.
#include "python_reference.hpp"

#include "wavestack/fft/fft.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <cstring>
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
