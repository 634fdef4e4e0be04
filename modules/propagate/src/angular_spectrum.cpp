#include "wavestack/propagate/angular_spectrum.hpp"

#include "detail.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/core/units.hpp"

#include <cmath>
#include <cstdio>
#include <cstring>
#include <limits>
#include <string>
#include <vector>

namespace wavestack::propagate {

namespace {

using detail::multiply;
using detail::positive_finite;
using detail::shape;

std::size_t padded_size(std::size_t n, double pad_factor) { return detail::padded_size(n, pad_factor); }
double band_limit(double medium_wavelength, double df, double z) {
  return detail::asm_band_limit(medium_wavelength, df, z);
}

std::string number(double v) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%g", v);
  return buf;
}

std::string length(double metres) { return std::isfinite(metres) ? format_length(metres) : number(metres); }

} // namespace

AngularSpectrum::AngularSpectrum(std::size_t h, std::size_t w, const Grid& grid, double distance,
                                 AngularSpectrumOptions options)
    : h_(h), w_(w), ph_(0), pw_(0), z_(distance), out_grid_(grid) {
  if (h == 0 || w == 0) fail_config("angular spectrum: the field is empty (" + shape(h, w) + ")");
  if (!positive_finite(grid.dy) || !positive_finite(grid.dx))
    fail_config("angular spectrum: the pixel pitch must be positive (got dy = " + length(grid.dy) +
                ", dx = " + length(grid.dx) + ")");
  if (!positive_finite(grid.wavelength))
    fail_config("angular spectrum: the wavelength must be positive (got " + length(grid.wavelength) + ")");
  if (!positive_finite(grid.medium_index))
    fail_config("angular spectrum: the medium index must be positive (got " + number(grid.medium_index) + ")");
  if (!std::isfinite(distance)) fail_config("angular spectrum: the distance must be a finite length");
  if (!(std::isfinite(options.pad_factor) && options.pad_factor >= 1.0))
    fail_config("angular spectrum: pad_factor must be at least 1 (got " + number(options.pad_factor) + ")");

  ph_ = padded_size(h, options.pad_factor);
  pw_ = padded_size(w, options.pad_factor);
  out_grid_.plane = grid.plane + distance;

  const double lambda = grid.medium_wavelength();
  const double kmax2 = 1.0 / (lambda * lambda); // (n/λ0)^2
  const double dfx = 1.0 / (static_cast<double>(pw_) * grid.dx);
  const double dfy = 1.0 / (static_cast<double>(ph_) * grid.dy);
  if (options.band_limit) {
    ulim_x_ = band_limit(lambda, dfx, distance);
    ulim_y_ = band_limit(lambda, dfy, distance);
  } else {
    ulim_x_ = ulim_y_ = std::numeric_limits<double>::infinity();
  }

  // H depends on fx² and fy² only, and bins k and n-k hold ±f, so the
  // transfer function is evaluated on bins 0..n/2 of each axis and mirrored:
  // a quarter of the sines and cosines (this runs once per plane of a focus
  // sweep). Frequencies and the band-limit mask per column, in double.
  const std::size_t hx = pw_ / 2, hy = ph_ / 2;
  std::vector<double> fx2(hx + 1);
  std::vector<char> keep_x(hx + 1);
  for (std::size_t kx = 0; kx <= hx; ++kx) {
    const double fx = fft::bin_frequency(kx, pw_, grid.dx);
    fx2[kx] = fx * fx;
    keep_x[kx] = std::abs(fx) <= ulim_x_;
  }

  transfer_.resize(ph_, pw_);
  const double norm = 1.0 / (static_cast<double>(ph_) * static_cast<double>(pw_));
  const double two_pi_z = 2.0 * M_PI * distance;
  for (std::size_t ky = 0; ky <= hy; ++ky) {
    const double fy = fft::bin_frequency(ky, ph_, grid.dy);
    const bool keep_y = std::abs(fy) <= ulim_y_;
    cfloat* row = transfer_.row(ky);
    for (std::size_t kx = 0; kx <= hx; ++kx) {
      const double a = kmax2 - fx2[kx] - fy * fy;
      if (!keep_y || !keep_x[kx] || a < 0.0) { // band-limited or evanescent
        row[kx] = cfloat(0.0f, 0.0f);
        continue;
      }
      // The phase 2πz·sqrt(a) can be 1e5 rad; evaluate it and its sine and
      // cosine in double, round only the unit phasor to float.
      const double phase = two_pi_z * std::sqrt(a);
      row[kx] = cfloat(static_cast<float>(norm * std::cos(phase)), static_cast<float>(norm * std::sin(phase)));
    }
    for (std::size_t kx = 1; kx <= (pw_ - 1) / 2; ++kx) row[pw_ - kx] = row[kx];
  }
  for (std::size_t ky = 1; ky <= (ph_ - 1) / 2; ++ky)
    std::memcpy(static_cast<void*>(transfer_.row(ph_ - ky)), transfer_.row(ky), pw_ * sizeof(cfloat));

  fwd_ = fft::plan_padded_c2c(ph_, pw_, h_, fft::Direction::forward);
  inv_ = fft::plan_c2c(ph_, pw_, fft::Direction::backward, true);
}

AngularSpectrum::Workspace AngularSpectrum::make_workspace() const {
  Workspace ws;
  ws.padded = Image<cfloat>(ph_, pw_, cfloat(0.0f, 0.0f));
  ws.spectrum = Image<cfloat>(ph_, pw_);
  ws.filled_h = 0;
  ws.filled_w = 0;
  return ws;
}

void AngularSpectrum::check_field(ImageView<const cfloat> v, const char* what) const {
  if (v.height() != h_ || v.width() != w_)
    fail_internal(std::string("angular spectrum: ") + what + " is " + shape(v.height(), v.width()) +
                  ", the propagator was planned for " + shape(h_, w_));
}

void AngularSpectrum::check_workspace(const Workspace& ws) const {
  if (ws.padded.height() != ph_ || ws.padded.width() != pw_ || ws.spectrum.height() != ph_ ||
      ws.spectrum.width() != pw_)
    fail_internal("angular spectrum: the workspace was made for another padded size (need " + shape(ph_, pw_) +
                  "); use make_workspace()");
}

void AngularSpectrum::pad_and_transform(ImageView<const cfloat> in, cfloat* spectrum, Workspace& ws) const {
  if (ws.filled_h != h_ || ws.filled_w != w_) {
    // Another propagator wrote a different corner: restore the zero padding
    // once (the next calls with this size skip it).
    if (ws.filled_h > h_ || ws.filled_w > w_) ws.padded.fill(cfloat(0.0f, 0.0f));
    ws.filled_h = h_;
    ws.filled_w = w_;
  }
  // Only the top-left h×w corner changes; the forward plan is out-of-place
  // and preserves its input, so the padding stays zero between calls.
  for (std::size_t y = 0; y < h_; ++y)
    std::memcpy(static_cast<void*>(ws.padded.row(y)), in.row(y), w_ * sizeof(cfloat));
  fwd_->execute(ws.padded.data(), spectrum);
}

void AngularSpectrum::inverse_and_crop(ImageView<cfloat> out, Workspace& ws) const {
  inv_->execute(ws.spectrum.data(), ws.spectrum.data());
  for (std::size_t y = 0; y < h_; ++y)
    std::memcpy(static_cast<void*>(out.row(y)), ws.spectrum.row(y), w_ * sizeof(cfloat));
}

void AngularSpectrum::apply(ImageView<const cfloat> in, ImageView<cfloat> out, Workspace& ws) const {
  check_field(in, "the input field");
  check_field(out, "the output field");
  if (z_ == 0.0) {
    if (in.data() != out.data())
      for (std::size_t y = 0; y < h_; ++y)
        std::memmove(static_cast<void*>(out.row(y)), in.row(y), w_ * sizeof(cfloat));
    return;
  }
  check_workspace(ws);
  pad_and_transform(in, ws.spectrum.data(), ws);
  multiply(reinterpret_cast<float*>(ws.spectrum.data()), reinterpret_cast<const float*>(transfer_.data()),
           transfer_.size());
  inverse_and_crop(out, ws);
}

void AngularSpectrum::forward_spectrum(ImageView<const cfloat> in, Image<cfloat>& spectrum, Workspace& ws) const {
  check_field(in, "the input field");
  check_workspace(ws);
  if (&spectrum == &ws.padded) fail_internal("angular spectrum: the spectrum cannot be the workspace's padded buffer");
  spectrum.resize(ph_, pw_); // no allocation when it already has the capacity
  pad_and_transform(in, spectrum.data(), ws);
}

void AngularSpectrum::apply_spectrum(const Image<cfloat>& spectrum, ImageView<cfloat> out, Workspace& ws) const {
  check_field(out, "the output field");
  check_workspace(ws);
  if (spectrum.height() != ph_ || spectrum.width() != pw_)
    fail_internal("angular spectrum: the spectrum is " + shape(spectrum.height(), spectrum.width()) + ", need " +
                  shape(ph_, pw_));
  if (&spectrum == &ws.spectrum) // the caller's spectrum is the scratch one: multiply in place
    multiply(reinterpret_cast<float*>(ws.spectrum.data()), reinterpret_cast<const float*>(transfer_.data()),
             transfer_.size());
  else
    multiply(reinterpret_cast<const float*>(spectrum.data()), reinterpret_cast<const float*>(transfer_.data()),
             reinterpret_cast<float*>(ws.spectrum.data()), transfer_.size());
  inverse_and_crop(out, ws);
}

} // namespace wavestack::propagate
