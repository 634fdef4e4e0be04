#include "wavestack/sideband/demodulator.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>
#include <string>

namespace wavestack::sideband {
namespace {

std::string num(double v, const char* fmt = "%.6g") {
  char buf[64];
  std::snprintf(buf, sizeof buf, fmt, v);
  return buf;
}

std::string size_text(std::size_t h, std::size_t w) {
  return std::to_string(h) + "x" + std::to_string(w);
}

/// Is signed frequency index k one of the n distinct bins (signed_bin range)?
bool in_spectrum(long k, std::size_t n) {
  return fft::signed_bin(fft::bin_of(k, n), n) == k;
}

/// Crop size along one axis: room for the mask's extent around the integer
/// carrier bin (outer radius + 0.5 bin of sub-bin offset) on both sides, plus
/// one bin so that the crop's Nyquist slot stays outside the mask; an even
/// FFT-friendly size, never larger than the hologram.
std::size_t crop_size(double outer_bins, std::size_t n) {
  const auto need = static_cast<std::size_t>(2.0 * std::ceil(outer_bins + 0.5) + 2.0);
  return std::min(fft::good_even_size(need), n);
}

} // namespace

Demodulator::Demodulator(std::size_t h, std::size_t w, const Grid& grid, const Carrier& carrier,
                         Order order, DemodulatorOptions opt)
    : h_(h), w_(w), grid_(grid), order_(order) {
  if (h == 0 || w == 0) fail_config("sideband demodulation needs a non-empty hologram size, got " + size_text(h, w));
  if (!(grid.dy > 0.0) || !(grid.dx > 0.0))
    fail_config("the hologram grid needs a positive pixel pitch (got dy = " + num(grid.dy) +
                " m, dx = " + num(grid.dx) + " m)");
  const std::size_t sw = w / 2 + 1;
  if (h * sw > std::numeric_limits<std::uint32_t>::max())
    fail_config("hologram of " + size_text(h, w) + " pixels is too large for sideband demodulation");

  // +1 convention (DESIGN.md): fx > 0, or fx = 0 and fy > 0.
  double fy = carrier.fy, fx = carrier.fx;
  if (fx < 0.0 || (fx == 0.0 && fy < 0.0)) {
    fy = -fy;
    fx = -fx;
  }
  const double d = std::hypot(fy, fx);
  if (!std::isfinite(d)) fail_config("the carrier frequency is not finite");
  dc_excl_ = dc_exclusion_radius(grid, opt.numerical_aperture, 0.0, opt.dc_exclusion);
  if (!(d > dc_excl_))
    fail_config("the carrier (" + describe(carrier, grid) + ", distance " + num(d) +
                " cycles/m) lies inside the zero-order exclusion radius " + num(dc_excl_) +
                " cycles/m; the orders cannot be separated");

  if (opt.radius < 0.0 || !std::isfinite(opt.radius))
    fail_config("sideband radius must be positive (cycles/m), got " + num(opt.radius));
  if (opt.radius > 0.0) {
    radius_ = opt.radius;
  } else if (opt.numerical_aperture > 0.0) {
    radius_ = radius_from_na(opt.numerical_aperture, grid.wavelength);
  } else {
    if (!(opt.radius_fraction > 0.0) || !std::isfinite(opt.radius_fraction))
      fail_config("sideband radius fraction must be positive, got " + num(opt.radius_fraction));
    radius_ = opt.radius_fraction * d;
  }
  if (!(opt.soft_edge >= 0.0) || !std::isfinite(opt.soft_edge))
    fail_config("sideband soft edge must be >= 0 (fraction of the radius), got " + num(opt.soft_edge));
  outer_ = radius_ * (1.0 + opt.soft_edge);

  const std::string cfg = num(d) + ":" + num(radius_) + ":" + num(outer_) + ":" + size_text(h, w);
  if (radius_ > d / 3.0 * (1.0 + 1e-9))
    log::warn("sideband radius " + num(radius_) + " cycles/m is " + num(radius_ / d, "%.3f") +
                  " of the carrier distance " + num(d) +
                  " cycles/m, more than 1/3: the selected order may overlap the zero order",
              "sideband:overlap:" + cfg);
  if (outer_ >= d)
    log::warn("the sideband mask (outer radius " + num(outer_) + " cycles/m) reaches the zero order at " +
                  num(d) + " cycles/m: the demodulated field contains the zero order",
              "sideband:mask-dc:" + cfg);

  // Centre of the chosen lobe.
  const double sign = order == Order::plus1 ? 1.0 : -1.0;
  const double fcy = sign * fy, fcx = sign * fx;
  const double kyc = fcy * static_cast<double>(h) * grid.dy;
  const double kxc = fcx * static_cast<double>(w) * grid.dx;
  cy_ = std::lround(kyc);
  cx_ = std::lround(kxc);
  dy_res_ = kyc - static_cast<double>(cy_);
  dx_res_ = kxc - static_cast<double>(cx_);

  const double outer_bins_y = outer_ * static_cast<double>(h) * grid.dy;
  const double outer_bins_x = outer_ * static_cast<double>(w) * grid.dx;
  ch_ = crop_size(outer_bins_y, h);
  cw_ = crop_size(outer_bins_x, w);
  out_grid_ = grid;
  out_grid_.dy = static_cast<double>(h) * grid.dy / static_cast<double>(ch_);
  out_grid_.dx = static_cast<double>(w) * grid.dx / static_cast<double>(cw_);

  const double fy_step = 1.0 / (static_cast<double>(h) * grid.dy);
  const double fx_step = 1.0 / (static_cast<double>(w) * grid.dx);
  const double soft = opt.soft_edge * radius_;
  auto weight_at = [&](long ky, long kx) {
    const double r = std::hypot(ky * fy_step - fcy, kx * fx_step - fcx);
    if (r <= radius_) return 1.0;
    if (r >= outer_ || soft <= 0.0) return 0.0;
    return 0.5 * (1.0 + std::cos(M_PI * (r - radius_) / soft));
  };

  // Mask, gather tables.
  const double norm = 1.0 / (static_cast<double>(h) * static_cast<double>(w));
  mask_.resize(ch_, cw_);
  std::size_t edge_dropped = 0;
  for (std::size_t i = 0; i < ch_; ++i)
    for (std::size_t j = 0; j < cw_; ++j) {
      const long ky = cy_ + fft::signed_bin(i, ch_);
      const long kx = cx_ + fft::signed_bin(j, cw_);
      double wgt = weight_at(ky, kx);
      if (wgt > 0.0 && !(in_spectrum(ky, h) && in_spectrum(kx, w))) {
        wgt = 0.0;
        ++edge_dropped;
      }
      mask_(i, j) = static_cast<float>(wgt);
      if (wgt <= 0.0) continue;
      const auto dst = static_cast<std::uint32_t>(i * cw_ + j);
      const auto fw = static_cast<float>(wgt * norm);
      if (kx >= 0)
        direct_.push_back({dst, static_cast<std::uint32_t>(fft::bin_of(ky, h) * sw + static_cast<std::size_t>(kx)), fw});
      else
        mirrored_.push_back({dst, static_cast<std::uint32_t>(fft::bin_of(-ky, h) * sw + static_cast<std::size_t>(-kx)), fw});
    }

  // Bins of the full mask (bounding box of the outer circle) versus bins kept.
  std::size_t full = 0;
  const long ey = static_cast<long>(std::ceil(outer_bins_y)) + 1;
  const long ex = static_cast<long>(std::ceil(outer_bins_x)) + 1;
  for (long a = -ey; a <= ey; ++a)
    for (long b = -ex; b <= ex; ++b)
      if (weight_at(cy_ + a, cx_ + b) > 0.0) ++full;
  const std::size_t kept = direct_.size() + mirrored_.size();
  clipped_ = kept < full;
  if (edge_dropped > 0)
    log::warn("the sideband mask around (" + num(kyc, "%.2f") + ", " + num(kxc, "%.2f") +
                  ") bins with outer radius " + num(outer_) + " cycles/m (" + num(outer_bins_y, "%.1f") +
                  " x " + num(outer_bins_x, "%.1f") + " bins) reaches beyond the spectrum edge (Nyquist fy = " +
                  num(0.5 / grid.dy) + ", fx = " + num(0.5 / grid.dx) + " cycles/m); " +
                  std::to_string(edge_dropped) + " of " + std::to_string(full) + " mask bins were dropped",
              "sideband:edge:" + cfg);
  if (kept + edge_dropped < full)
    log::warn("the sideband mask (outer radius " + num(outer_bins_y, "%.1f") + " x " +
                  num(outer_bins_x, "%.1f") + " bins) does not fit in a crop of at most the hologram size " +
                  size_text(h, w) + "; " + std::to_string(full - kept - edge_dropped) + " of " +
                  std::to_string(full) + " mask bins were dropped",
              "sideband:crop:" + cfg);

  // Ramp removing the sub-bin carrier residual.
  ramp_.resize(ch_, cw_);
  for (std::size_t p = 0; p < ch_; ++p)
    for (std::size_t q = 0; q < cw_; ++q) {
      const double ph = -2.0 * M_PI *
                        (dy_res_ * static_cast<double>(p) / static_cast<double>(ch_) +
                         dx_res_ * static_cast<double>(q) / static_cast<double>(cw_));
      ramp_(p, q) = cfloat(static_cast<float>(std::cos(ph)), static_cast<float>(std::sin(ph)));
    }

  fwd_ = fft::plan_r2c(h, w);
  inv_ = fft::plan_c2c(ch_, cw_, fft::Direction::backward, /*in_place=*/true);
}

Demodulator::Workspace Demodulator::make_workspace() const {
  Workspace ws;
  ws.input.resize(h_, w_);
  ws.spectrum.resize(h_, w_ / 2 + 1);
  ws.crop.resize(ch_, cw_);
  return ws;
}

void Demodulator::gather(ImageView<const float> holo, Workspace& ws) const {
  if (holo.height() != h_ || holo.width() != w_)
    fail_input("hologram is " + size_text(holo.height(), holo.width()) +
               " pixels but sideband demodulation was planned for " + size_text(h_, w_));
  if (ws.input.height() != h_ || ws.input.width() != w_ || ws.spectrum.height() != h_ ||
      ws.spectrum.width() != w_ / 2 + 1 || ws.crop.height() != ch_ || ws.crop.width() != cw_)
    fail_internal("sideband workspace was not made by this demodulator (call make_workspace())");

  const float* src = holo.data();
  if (!holo.contiguous() || !fft::is_aligned(src)) {
    for (std::size_t y = 0; y < h_; ++y) std::copy_n(holo.row(y), w_, ws.input.row(y));
    src = ws.input.data();
  }
  fwd_->execute(src, ws.spectrum.data());

  const cfloat* s = ws.spectrum.data();
  cfloat* c = ws.crop.data();
  std::fill_n(c, ch_ * cw_, cfloat(0.0f, 0.0f));
  for (const Tap& t : direct_) c[t.dst] = s[t.src] * t.weight;
  for (const Tap& t : mirrored_) c[t.dst] = std::conj(s[t.src]) * t.weight;
}

void Demodulator::apply(ImageView<const float> holo, ImageView<cfloat> out, Workspace& ws) const {
  if (out.height() != ch_ || out.width() != cw_)
    fail_input("sideband output is " + size_text(out.height(), out.width()) + " but the crop is " +
               size_text(ch_, cw_));
  gather(holo, ws);
  inv_->execute(ws.crop.data(), ws.crop.data());
  for (std::size_t p = 0; p < ch_; ++p) {
    const cfloat* c = ws.crop.row(p);
    const cfloat* r = ramp_.row(p);
    cfloat* o = out.row(p);
    for (std::size_t q = 0; q < cw_; ++q) o[q] = c[q] * r[q];
  }
}

} // namespace wavestack::sideband
