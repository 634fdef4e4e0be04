#include "wavestack/sideband/carrier.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/fft/fft.hpp"

#include <algorithm>
#include <array>
#include <complex>
#include <cstdio>
#include <limits>
#include <vector>

namespace wavestack::sideband {
namespace {

using cdouble = std::complex<double>;

std::string num(double v, const char* fmt = "%.6g") {
  char buf[64];
  std::snprintf(buf, sizeof buf, fmt, v);
  return buf;
}

void check_grid(const Grid& grid) {
  if (!(grid.dy > 0.0) || !(grid.dx > 0.0) || !std::isfinite(grid.dy) || !std::isfinite(grid.dx))
    fail_config("the hologram grid needs a positive pixel pitch (got dy = " + num(grid.dy) +
                " m, dx = " + num(grid.dx) + " m)");
}

/// Symmetric Hann window of length n (w = 1 for n = 1).
std::vector<double> hann(std::size_t n) {
  std::vector<double> w(n, 1.0);
  if (n > 1)
    for (std::size_t i = 0; i < n; ++i)
      w[i] = 0.5 - 0.5 * std::cos(2.0 * M_PI * static_cast<double>(i) / static_cast<double>(n - 1));
  return w;
}

/// |DTFT| of g (h×w, row-major) on the grid u_i = cu + s(i-5)/5, v_j = cv +
/// s(j-5)/5 (bins), i, j = 0..10, as two matrix products.
constexpr int kGrid = 11;
void dtft_grid(const std::vector<double>& g, std::size_t h, std::size_t w, double cu, double cv,
               double s, std::array<double, kGrid * kGrid>& mag) {
  std::vector<cdouble> ex(kGrid * w), ey(kGrid * h);
  for (int j = 0; j < kGrid; ++j) {
    const double v = cv + s * (j - kGrid / 2) / (kGrid / 2);
    for (std::size_t n = 0; n < w; ++n)
      ex[j * w + n] = std::polar(1.0, -2.0 * M_PI * v * static_cast<double>(n) / static_cast<double>(w));
  }
  for (int i = 0; i < kGrid; ++i) {
    const double u = cu + s * (i - kGrid / 2) / (kGrid / 2);
    for (std::size_t m = 0; m < h; ++m)
      ey[i * h + m] = std::polar(1.0, -2.0 * M_PI * u * static_cast<double>(m) / static_cast<double>(h));
  }
  // t[m][j] = sum_n g[m][n] ex[j][n]
  std::vector<cdouble> t(h * kGrid);
  for (std::size_t m = 0; m < h; ++m) {
    const double* row = g.data() + m * w;
    for (int j = 0; j < kGrid; ++j) {
      const cdouble* e = ex.data() + j * w;
      double re = 0, im = 0;
      for (std::size_t n = 0; n < w; ++n) {
        re += row[n] * e[n].real();
        im += row[n] * e[n].imag();
      }
      t[m * kGrid + j] = {re, im};
    }
  }
  for (int i = 0; i < kGrid; ++i)
    for (int j = 0; j < kGrid; ++j) {
      cdouble acc = 0;
      for (std::size_t m = 0; m < h; ++m) acc += ey[i * h + m] * t[m * kGrid + j];
      mag[i * kGrid + j] = std::abs(acc);
    }
}

/// Vertex offset of a parabola through (-1, a), (0, b), (1, c), in [-0.5, 0.5].
double parabola_offset(double a, double b, double c) {
  const double den = a - 2.0 * b + c;
  if (!(den < 0.0)) return 0.0;
  return std::clamp(0.5 * (a - c) / den, -0.5, 0.5);
}

} // namespace

const char* to_string(Order order) noexcept { return order == Order::plus1 ? "+1" : "-1"; }

std::string describe(const Carrier& c, const Grid& grid) {
  std::string s = "carrier at (" + num(c.ky, "%.3f") + ", " + num(c.kx, "%.3f") + ") bins, fy = " +
                  num(c.fy * 1e-3, "%.4g") + " /mm, fx = " + num(c.fx * 1e-3, "%.4g") + " /mm";
  if (grid.dy > 0 && grid.dx > 0) s += ", fringe period " + num(c.period_pixels(grid), "%.3f") + " px";
  if (c.strength > 0) s += ", peak " + num(c.strength, "%.3g") + " x the spectrum median";
  return s;
}

Carrier carrier_from_frequency(double fy, double fx, std::size_t h, std::size_t w, const Grid& grid) {
  check_grid(grid);
  if (fx < 0.0 || (fx == 0.0 && fy < 0.0)) {
    fy = -fy;
    fx = -fx;
  }
  Carrier c;
  c.fy = fy;
  c.fx = fx;
  c.ky = fy * static_cast<double>(h) * grid.dy;
  c.kx = fx * static_cast<double>(w) * grid.dx;
  return c;
}

double radius_from_na(double na, double wavelength) {
  if (!(na > 0.0) || !std::isfinite(na))
    fail_config("numerical aperture must be positive, got " + num(na));
  if (!(wavelength > 0.0) || !std::isfinite(wavelength))
    fail_config("a numerical aperture needs the vacuum wavelength, got " + num(wavelength) + " m");
  return na / wavelength;
}

double dc_exclusion_radius(const Grid& grid, double na, double wavelength, double dc_exclusion) {
  check_grid(grid);
  if (dc_exclusion < 0.0 || !std::isfinite(dc_exclusion))
    fail_config("zero-order exclusion radius must be >= 0 cycles/m, got " + num(dc_exclusion));
  if (dc_exclusion > 0.0) return dc_exclusion;
  if (na > 0.0) return 2.0 * radius_from_na(na, wavelength > 0.0 ? wavelength : grid.wavelength);
  return default_dc_fraction * std::min(0.5 / grid.dy, 0.5 / grid.dx);
}

Carrier find_carrier(ImageView<const float> holo, const Grid& grid, const CarrierSearchOptions& opt) {
  check_grid(grid);
  const std::size_t h = holo.height(), w = holo.width();
  if (holo.empty()) fail_input("the hologram used for the carrier search is empty");
  if (h < 8 || w < 8)
    fail_input("the hologram used for the carrier search is " + std::to_string(h) + "x" + std::to_string(w) +
               " pixels; at least 8x8 are needed to resolve a carrier");
  if (!(opt.precision > 0.0) || opt.precision > 0.5)
    fail_config("carrier search precision must lie in (0, 0.5] bins, got " + num(opt.precision));
  const double excl = dc_exclusion_radius(grid, opt.numerical_aperture, opt.wavelength, opt.dc_exclusion);

  // Mean-free, Hann-windowed copy in double.
  std::vector<double> g(h * w);
  std::size_t nonfinite = 0;
  double sum = 0;
  for (std::size_t y = 0; y < h; ++y) {
    const float* p = holo.row(y);
    for (std::size_t x = 0; x < w; ++x) {
      if (!std::isfinite(p[x])) ++nonfinite;
      g[y * w + x] = p[x];
      sum += p[x];
    }
  }
  if (nonfinite)
    fail_input("the hologram used for the carrier search has " + std::to_string(nonfinite) +
               " NaN/Inf pixels, so its spectrum is undefined");
  const double mean = sum / static_cast<double>(h * w);
  double dev = 0;
  for (double& v : g) {
    v -= mean;
    dev = std::max(dev, std::abs(v));
  }
  if (dev == 0.0)
    fail_input("the hologram used for the carrier search is flat (every pixel equals " + num(mean) +
               "): it has no fringes, so no off-axis carrier can be found");
  const auto wy = hann(h), wx = hann(w);
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) g[y * w + x] *= wy[y] * wx[x];

  // Coarse search on the r2c spectrum (non-negative column frequencies; the
  // other half is the conjugate mirror).
  Image<float> in(h, w);
  for (std::size_t i = 0; i < h * w; ++i) in.data()[i] = static_cast<float>(g[i]);
  const auto plan = fft::plan_r2c(h, w);
  const std::size_t sw = plan->spectrum_width();
  Image<cfloat> spec(h, sw);
  plan->execute(in.data(), spec.data());

  const double fy_step = 1.0 / (static_cast<double>(h) * grid.dy);
  const double fx_step = 1.0 / (static_cast<double>(w) * grid.dx);
  std::vector<float> outside;
  outside.reserve(h * sw);
  double best = -1.0, inside_max = 0.0;
  long best_ky = 0, best_kx = 0;
  for (std::size_t r = 0; r < h; ++r) {
    const long ky = fft::signed_bin(r, h);
    for (std::size_t c = 0; c < sw; ++c) {
      const long kx = static_cast<long>(c);
      const double m = std::abs(spec(r, c));
      const double fy = ky * fy_step, fx = kx * fx_step;
      const bool excluded = (fy * fy + fx * fx <= excl * excl) || (ky * ky + kx * kx <= 2);
      if (excluded) {
        inside_max = std::max(inside_max, m);
        continue;
      }
      outside.push_back(static_cast<float>(m));
      if (m > best) {
        best = m;
        best_ky = ky;
        best_kx = kx;
      }
    }
  }
  if (outside.empty())
    fail_config("the zero-order exclusion radius " + num(excl) +
                " cycles/m covers the whole spectrum (Nyquist fy = " + num(0.5 / grid.dy) +
                ", fx = " + num(0.5 / grid.dx) + " cycles/m); no carrier can lie outside it");
  if (!(best > 0.0) || best < 1e-6 * inside_max)
    fail_input("the hologram has no spectral peak outside the zero-order region (radius " + num(excl) +
               " cycles/m): it shows no off-axis fringes");
  // A carrier is a local maximum of the spectrum magnitude. The flank of the
  // zero order (a fringe-free frame: smooth illumination, blocked reference)
  // decreases outward, so its strongest bin outside the exclusion has a
  // larger neighbour inside it.
  auto mag_at = [&](long ky, long kx) -> double {
    if (kx < 0) {
      ky = -ky;
      kx = -kx;
    }
    if (kx >= static_cast<long>(sw)) return 0.0; // beyond Nyquist (odd w): not a bin
    return std::abs(spec(fft::bin_of(ky, h), static_cast<std::size_t>(kx)));
  };
  for (long a = -1; a <= 1; ++a)
    for (long b = -1; b <= 1; ++b)
      if ((a || b) && mag_at(best_ky + a, best_kx + b) > best)
        fail_input("the hologram has no distinct spectral peak outside the zero-order region (radius " +
                   num(excl) + " cycles/m): the strongest bin there, at (" + std::to_string(best_ky) + ", " +
                   std::to_string(best_kx) +
                   "), lies on the flank of the zero order; the frame shows no off-axis fringes, or the "
                   "carrier is inside the exclusion radius");
  auto mid = outside.begin() + static_cast<std::ptrdiff_t>(outside.size() / 2);
  std::nth_element(outside.begin(), mid, outside.end());
  const double median = *mid;

  // Sub-bin refinement: zoom on the DTFT magnitude.
  double cu = static_cast<double>(best_ky), cv = static_cast<double>(best_kx);
  double s = 1.0; // half-span of the grid in bins
  std::array<double, kGrid * kGrid> mag{};
  int moves = 0;
  for (;;) {
    dtft_grid(g, h, w, cu, cv, s, mag);
    const auto it = std::max_element(mag.begin(), mag.end());
    const int k = static_cast<int>(it - mag.begin());
    const int bi = k / kGrid, bj = k % kGrid;
    const double step = s / (kGrid / 2);
    const bool border = bi == 0 || bj == 0 || bi == kGrid - 1 || bj == kGrid - 1;
    if (!border && step <= opt.precision) {
      // Final parabolic touch on the finest grid.
      cu += step * (bi - kGrid / 2 + parabola_offset(mag[(bi - 1) * kGrid + bj], mag[k], mag[(bi + 1) * kGrid + bj]));
      cv += step * (bj - kGrid / 2 + parabola_offset(mag[k - 1], mag[k], mag[k + 1]));
      break;
    }
    cu += step * (bi - kGrid / 2);
    cv += step * (bj - kGrid / 2);
    if (border) {
      if (++moves > 20) break; // peak keeps escaping: keep the best point found
    } else {
      s /= 5.0;
    }
  }

  Carrier c;
  if (std::abs(cv) < opt.precision) cv = 0.0;
  if (cv < 0.0 || (cv == 0.0 && cu < 0.0)) {
    cu = -cu;
    cv = -cv;
  }
  c.ky = cu;
  c.kx = cv;
  c.fy = cu * fy_step;
  c.fx = cv * fx_step;
  c.strength = median > 0.0 ? best / median : std::numeric_limits<double>::infinity();
  if (c.strength < 8.0)
    log::warn("the strongest spectral peak outside the zero order is only " + num(c.strength, "%.3g") +
                  " times the spectrum median; the hologram may not be off-axis (" + describe(c, grid) + ")",
              "sideband:weak-carrier:" + num(c.ky) + ":" + num(c.kx));
  return c;
}

} // namespace wavestack::sideband
