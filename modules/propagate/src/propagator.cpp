#include "wavestack/propagate/propagator.hpp"

#include "detail.hpp"

#include <cmath>
#include <cstring>

namespace wavestack::propagate {

using detail::shape;

// --------------------------------------------------------------------------
// Propagator

Workspace Propagator::make_workspace() const {
  Workspace ws;
  ws.padded = Image<cfloat>(ph_, pw_, cfloat(0.0f, 0.0f));
  ws.spectrum = Image<cfloat>(ph_, pw_);
  ws.filled_h = 0;
  ws.filled_w = 0;
  return ws;
}

void Propagator::check_in(ImageView<const cfloat> v) const {
  if (v.height() != h_ || v.width() != w_)
    fail_internal(std::string(method_name(method())) + ": the input field is " + shape(v.height(), v.width()) +
                  ", the propagator was planned for " + shape(h_, w_));
}

void Propagator::check_out(ImageView<const cfloat> v) const {
  if (v.height() != oh_ || v.width() != ow_)
    fail_internal(std::string(method_name(method())) + ": the output field is " + shape(v.height(), v.width()) +
                  ", the propagator produces " + shape(oh_, ow_));
}

void Propagator::check_workspace(const Workspace& ws) const {
  if (ws.padded.height() != ph_ || ws.padded.width() != pw_ || ws.spectrum.height() != ph_ ||
      ws.spectrum.width() != pw_)
    fail_internal(std::string(method_name(method())) + ": the workspace was made for another padded size (need " +
                  shape(ph_, pw_) + "); use make_workspace()");
}

// --------------------------------------------------------------------------
// TransferPropagator

TransferPropagator::TransferPropagator(std::size_t h, std::size_t w, const Grid& grid, double distance,
                                       const MethodChoice& choice, bool band_limit) {
  detail::check_setup("propagate", h, w, grid, distance);
  if (choice.method == Method::fresnel_single_fft)
    fail_internal("TransferPropagator: single-FFT Fresnel is not a transfer-function method");
  if (!(std::isfinite(choice.pad_factor) && choice.pad_factor >= 1.0))
    fail_config("propagate: the padding factor must be at least 1 (got " + detail::number(choice.pad_factor) + ")");
  choice_ = choice;
  h_ = oh_ = h;
  w_ = ow_ = w;
  ph_ = detail::padded_size(h, choice.pad_factor);
  pw_ = detail::padded_size(w, choice.pad_factor);
  z_ = distance;
  out_grid_ = grid;
  out_grid_.plane = grid.plane + distance;
  if (distance != 0.0)
    tf_ = cached_transfer(choice.method == Method::fresnel ? TransferKind::fresnel : TransferKind::angular_spectrum,
                          ph_, pw_, grid, distance, band_limit);
  fwd_ = fft::plan_padded_c2c(ph_, pw_, h_, fft::Direction::forward);
  inv_ = fft::plan_c2c(ph_, pw_, fft::Direction::backward, true);
}

void TransferPropagator::apply(ImageView<const cfloat> in, ImageView<cfloat> out, Workspace& ws) const {
  check_in(in);
  check_out(out);
  if (!tf_) { // distance 0: exact copy
    if (in.data() != out.data())
      for (std::size_t y = 0; y < h_; ++y)
        std::memmove(static_cast<void*>(out.row(y)), in.row(y), w_ * sizeof(cfloat));
    return;
  }
  check_workspace(ws);
  detail::fill_corner(in, ws);
  fwd_->execute(ws.padded.data(), ws.spectrum.data());
  tf_->multiply(ws.spectrum.data());
  inv_->execute(ws.spectrum.data(), ws.spectrum.data());
  for (std::size_t y = 0; y < h_; ++y)
    std::memcpy(static_cast<void*>(out.row(y)), ws.spectrum.row(y), w_ * sizeof(cfloat));
}

// --------------------------------------------------------------------------
// FresnelSingleFFT

namespace {

cfloat phasor(double phase) {
  const double p = detail::wrap(phase);
  return cfloat(static_cast<float>(std::cos(p)), static_cast<float>(std::sin(p)));
}

/// e^{iπx²/(λz)} at x = (j − n/2)·d, j = 0..n-1.
std::vector<cfloat> input_chirp(std::size_t n, double d, double lambda_z) {
  std::vector<cfloat> t(n);
  const long c = static_cast<long>(n / 2);
  for (std::size_t j = 0; j < n; ++j) {
    const double x = static_cast<double>(static_cast<long>(j) - c) * d;
    t[j] = phasor(M_PI * x * x / lambda_z);
  }
  return t;
}

/// e^{iπx2²/(λz)} · e^{s·i2π c m'/P} at x2 = m'·d2, m' = m − P/2, c = n/2 the
/// input centre, s = +1 (forward DFT, z > 0) or −1 (backward DFT, z < 0);
/// the centring phase undoes the input sitting at j = 0..n-1 instead of
/// j − c. (c·m') mod P is taken in integers so the phase stays exact.
std::vector<cfloat> output_chirp(std::size_t P, std::size_t n, double d2, double lambda_z, int s,
                                 std::complex<double> scale) {
  std::vector<cfloat> t(P);
  const long c = static_cast<long>(n / 2), half = static_cast<long>(P / 2), lp = static_cast<long>(P);
  for (std::size_t m = 0; m < P; ++m) {
    const long mp = static_cast<long>(m) - half;
    const double x2 = static_cast<double>(mp) * d2;
    const long r = ((c * mp) % lp + lp) % lp;
    const double phase = detail::wrap(M_PI * x2 * x2 / lambda_z) +
                         s * 2.0 * M_PI * static_cast<double>(r) / static_cast<double>(lp);
    const std::complex<double> v = scale * std::polar(1.0, detail::wrap(phase));
    t[m] = cfloat(static_cast<float>(v.real()), static_cast<float>(v.imag()));
  }
  return t;
}

inline void cmul(float a, float b, float c, float d, float& re, float& im) {
  re = a * c - b * d;
  im = a * d + b * c;
}

} // namespace

FresnelSingleFFT::FresnelSingleFFT(std::size_t h, std::size_t w, const Grid& grid, double distance,
                                   const MethodChoice& choice) {
  detail::check_setup("single-FFT Fresnel", h, w, grid, distance);
  if (distance == 0.0)
    fail_config("single-FFT Fresnel needs a non-zero distance (its output pitch λz/(N·Δx) would be 0)");
  if (choice.method != Method::fresnel_single_fft)
    fail_internal("FresnelSingleFFT: the choice is for another method");
  if (!(std::isfinite(choice.pad_factor) && choice.pad_factor >= 1.0))
    fail_config("propagate: the padding factor must be at least 1 (got " + detail::number(choice.pad_factor) + ")");
  choice_ = choice;
  h_ = h;
  w_ = w;
  ph_ = oh_ = detail::padded_size(h, choice.pad_factor);
  pw_ = ow_ = detail::padded_size(w, choice.pad_factor);
  z_ = distance;
  const double lambda = grid.medium_wavelength();
  const double lz = lambda * distance; // signed
  const double dx2 = lambda * std::fabs(distance) / (static_cast<double>(pw_) * grid.dx);
  const double dy2 = lambda * std::fabs(distance) / (static_cast<double>(ph_) * grid.dy);
  out_grid_ = grid;
  out_grid_.dx = dx2;
  out_grid_.dy = dy2;
  out_grid_.plane = grid.plane + distance;

  in_x_ = input_chirp(w, grid.dx, lz);
  in_y_ = input_chirp(h, grid.dy, lz);
  const int s = distance > 0 ? 1 : -1;
  // Constant e^{ikz}/(iλz)·Δx1·Δy1, folded into the row table.
  const std::complex<double> scale =
      std::polar(1.0, detail::wrap(2.0 * M_PI / lambda * distance)) / std::complex<double>(0.0, lz) * grid.dx * grid.dy;
  out_x_ = output_chirp(pw_, w, dx2, lz, s, 1.0);
  out_y_ = output_chirp(ph_, h, dy2, lz, s, scale);
  dft_ = fft::plan_c2c(ph_, pw_, distance > 0 ? fft::Direction::forward : fft::Direction::backward, false);
}

void FresnelSingleFFT::transform(ImageView<const cfloat> in, cfloat* spectrum, Workspace& ws) const {
  if (ws.filled_h != h_ || ws.filled_w != w_) {
    if (ws.filled_h > h_ || ws.filled_w > w_) ws.padded.fill(cfloat(0.0f, 0.0f));
    ws.filled_h = h_;
    ws.filled_w = w_;
  }
  const float* cx = reinterpret_cast<const float*>(in_x_.data());
  for (std::size_t y = 0; y < h_; ++y) {
    const float* src = reinterpret_cast<const float*>(in.row(y));
    float* dst = reinterpret_cast<float*>(ws.padded.row(y));
    const float ry = in_y_[y].real(), iy = in_y_[y].imag();
    for (std::size_t x = 0; x < w_; ++x) {
      float tr, ti;
      cmul(ry, iy, cx[2 * x], cx[2 * x + 1], tr, ti);
      cmul(src[2 * x], src[2 * x + 1], tr, ti, dst[2 * x], dst[2 * x + 1]);
    }
  }
  dft_->execute(ws.padded.data(), spectrum);
}

void FresnelSingleFFT::finish(const cfloat* spectrum, ImageView<cfloat> out) const {
  // out(m) = chirp(m) · F((m − P/2) mod P): per row two contiguous segments.
  const std::size_t seg1 = pw_ / 2, start1 = pw_ - pw_ / 2; // out [0, seg1) ← F [start1, pw)
  const float* ox = reinterpret_cast<const float*>(out_x_.data());
  for (std::size_t y = 0; y < ph_; ++y) {
    const float* src = reinterpret_cast<const float*>(spectrum + ((y + ph_ - ph_ / 2) % ph_) * pw_);
    float* dst = reinterpret_cast<float*>(out.row(y));
    const float ry = out_y_[y].real(), iy = out_y_[y].imag();
    for (std::size_t x = 0; x < seg1; ++x) {
      float tr, ti;
      cmul(ry, iy, ox[2 * x], ox[2 * x + 1], tr, ti);
      const float* s = src + 2 * (start1 + x);
      cmul(s[0], s[1], tr, ti, dst[2 * x], dst[2 * x + 1]);
    }
    for (std::size_t x = seg1; x < pw_; ++x) {
      float tr, ti;
      cmul(ry, iy, ox[2 * x], ox[2 * x + 1], tr, ti);
      const float* s = src + 2 * (x - seg1);
      cmul(s[0], s[1], tr, ti, dst[2 * x], dst[2 * x + 1]);
    }
  }
}

void FresnelSingleFFT::apply(ImageView<const cfloat> in, ImageView<cfloat> out, Workspace& ws) const {
  check_in(in);
  check_out(out);
  check_workspace(ws);
  transform(in, ws.spectrum.data(), ws);
  finish(ws.spectrum.data(), out);
}

// --------------------------------------------------------------------------

std::unique_ptr<Propagator> make_propagator(std::size_t h, std::size_t w, const Grid& grid, double distance,
                                            const PropagatorOptions& options) {
  const MethodChoice choice = choose_method(h, w, grid, distance, options);
  detail::warn_if_out_of_range(choice, h, w, grid, "propagate");
  if (choice.method == Method::fresnel_single_fft)
    return std::make_unique<FresnelSingleFFT>(h, w, grid, distance, choice);
  return std::make_unique<TransferPropagator>(h, w, grid, distance, choice, options.band_limit);
}

} // namespace wavestack::propagate
