// Good FFT sizes, frequency bins and fftshift/ifftshift against numpy.
#include "python_reference.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/fft/fft.hpp"

#include <catch2/catch.hpp>

#include <cstring>
#include <utility>
#include <vector>

using namespace wavestack;
using namespace fft_test;

namespace {
/// Largest prime factor, by trial division (independent of the library's test).
std::size_t largest_prime_factor(std::size_t n) {
  std::size_t best = 1;
  for (std::size_t p = 2; p * p <= n; ++p)
    while (n % p == 0) {
      best = p;
      n /= p;
    }
  return n > 1 ? n : best;
}
} // namespace

TEST_CASE("good_size is the smallest 7-smooth size at or above n") {
  // Definition: n' >= n with all prime factors in {2,3,5,7} ("7-smooth";
  // FFTW is fastest for such sizes: FFTW manual, "Complex DFTs" [confirmed;
  // citation from memory]). Checked against trial-division factorisation.
  for (std::size_t n = 1; n <= 5000; ++n) {
    const std::size_t g = fft::good_size(n);
    INFO("n = " << n);
    REQUIRE(g >= n);
    REQUIRE(largest_prime_factor(g) <= 7);
    for (std::size_t m = n; m < g; ++m) REQUIRE(largest_prime_factor(m) > 7);
  }
  // A few values worked by hand: 1021 is prime, 1022 = 2·7·73, 1023 = 3·11·31,
  // 1024 = 2^10; 1025 = 5^2·41, 1026 = 2·3^3·19, 1027 = 13·79, 1028 = 4·257,
  // 1029 = 3·7^3; 97 prime, 98 = 2·7^2.
  CHECK(fft::good_size(1021) == 1024);
  CHECK(fft::good_size(1025) == 1029);
  CHECK(fft::good_size(97) == 98);
  CHECK(fft::good_size(0) == 1);
}

TEST_CASE("good_even_size is the smallest even 7-smooth size at or above n") {
  for (std::size_t n = 1; n <= 3000; ++n) {
    const std::size_t g = fft::good_even_size(n);
    INFO("n = " << n);
    REQUIRE(g >= n);
    REQUIRE(g % 2 == 0);
    REQUIRE(largest_prime_factor(g) <= 7);
    for (std::size_t m = n; m < g; ++m) REQUIRE((m % 2 == 1 || largest_prime_factor(m) > 7));
  }
  // 45 = 3^2·5 is good but odd; 46 = 2·23, 47 prime, 48 = 2^4·3.
  CHECK(fft::good_even_size(45) == 48);
  CHECK(fft::good_size(45) == 45);
}

TEST_CASE("signed_bin and bin_frequency follow numpy.fft.fftfreq for odd and even n") {
  for (std::size_t n : {1u, 2u, 7u, 8u, 45u, 64u}) {
    INFO("n = " << n);
    const double d = 3.45e-6;
    TempFiles tmp{{temp_path("fftfreq_" + std::to_string(n))}};
    REQUIRE(run_reference(std::string("fftfreq ") + shell_quoted(tmp.paths[0]) + " " + std::to_string(n) + " 3.45e-6") == 0);
    const auto ref = read_raw<double>(tmp.paths[0], n);
    REQUIRE(ref.size() == n);
    for (std::size_t k = 0; k < n; ++k) {
      // numpy.fft.fftfreq(n, d)[k] (NumPy reference [confirmed] for even n,
      // the odd-n layout [0..(n-1)/2, -(n-1)/2..-1] checked here); 1e-12:
      // both are one division in double.
      CHECK(fft::bin_frequency(k, n, d) == Approx(ref[k]).epsilon(1e-12).margin(1e-6));
      CHECK(fft::bin_of(fft::signed_bin(k, n), n) == k);
    }
  }
}

TEST_CASE("fftshift and ifftshift match numpy for odd and even sizes") {
  const std::vector<std::pair<std::size_t, std::size_t>> shapes = {{4, 6}, {5, 7}, {1, 3}, {6, 5}, {45, 81}, {2, 1}};
  for (auto [h, w] : shapes) {
    const std::string tag = std::to_string(h) + "x" + std::to_string(w);
    INFO("shape " << tag);
    Image<cfloat> x(h, w);
    for (std::size_t y = 0; y < h; ++y)
      for (std::size_t c = 0; c < w; ++c) x(y, c) = {static_cast<float>(y), static_cast<float>(c)};
    TempFiles tmp{{temp_path("shift_in_" + tag), temp_path("shift_out_" + tag), temp_path("ishift_out_" + tag)}};
    write_raw(tmp.paths[0], x.data(), x.size());
    const std::string dims = std::string(" ") + std::to_string(h) + " " + std::to_string(w);
    REQUIRE(run_reference(std::string("shift ") + shell_quoted(tmp.paths[0]) + " " + shell_quoted(tmp.paths[1]) + dims + " fftshift") == 0);
    REQUIRE(run_reference(std::string("shift ") + shell_quoted(tmp.paths[0]) + " " + shell_quoted(tmp.paths[2]) + dims + " ifftshift") == 0);
    const auto ref_s = read_raw<cfloat>(tmp.paths[1], x.size());
    const auto ref_i = read_raw<cfloat>(tmp.paths[2], x.size());
    REQUIRE(ref_s.size() == x.size());
    REQUIRE(ref_i.size() == x.size());

    // numpy.fft.fftshift / ifftshift (NumPy reference [from memory]; the
    // arrays come from numpy itself): a pure permutation, so exact equality.
    Image<cfloat> s(h, w), i(h, w), back(h, w);
    fft::fftshift(x.view(), s.view());
    fft::ifftshift(x.view(), i.view());
    CHECK(std::memcmp(s.data(), ref_s.data(), x.size() * sizeof(cfloat)) == 0);
    CHECK(std::memcmp(i.data(), ref_i.data(), x.size() * sizeof(cfloat)) == 0);
    // The zero-frequency bin lands at (h/2, w/2).
    CHECK(s(h / 2, w / 2) == cfloat(0, 0));
    // ifftshift undoes fftshift (also for odd sizes, where the two differ).
    fft::ifftshift(s.view(), back.view());
    CHECK(std::memcmp(back.data(), x.data(), x.size() * sizeof(cfloat)) == 0);

    // The float overload is the same permutation, also on strided views.
    Image<float> xr(h, w + 3), sr(h, w + 2);
    for (std::size_t y = 0; y < h; ++y)
      for (std::size_t c = 0; c < w; ++c) xr(y, c) = static_cast<float>(y * w + c);
    fft::fftshift(ImageView<const float>(xr.view().sub(0, 0, h, w)), sr.view().sub(0, 0, h, w));
    for (std::size_t y = 0; y < h; ++y)
      for (std::size_t c = 0; c < w; ++c) {
        const cfloat r = ref_s[y * w + c]; // (source row, source column)
        CHECK(sr(y, c) == static_cast<float>(static_cast<std::size_t>(r.real()) * w +
                                              static_cast<std::size_t>(r.imag())));
      }
  }
  Image<cfloat> a(3, 3), b(3, 4);
  CHECK_THROWS_AS(fft::fftshift(a.view(), b.view()), Error);
  CHECK_THROWS_AS(fft::fftshift(a.view(), a.view()), Error);
}
