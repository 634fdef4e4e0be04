#include "wavestack/wavefront/zernike_fit.hpp"

#include "sampled_basis.hpp"
#include "wavestack/core/error.hpp"
#include "wavestack/wavefront/zernike.hpp"

#include <algorithm>
#include <cmath>
#include <sstream>
#include <string>

namespace wavestack::wavefront {

Pupil resolved_pupil(std::size_t height, std::size_t width, const Pupil& in) {
  if (height == 0 || width == 0) fail_config("a Zernike pupil needs a non-empty frame");
  Pupil p = in;
  if (std::isnan(p.cx)) p.cx = (static_cast<double>(width) - 1.0) / 2.0;
  if (std::isnan(p.cy)) p.cy = (static_cast<double>(height) - 1.0) / 2.0;
  if (p.radius <= 0.0) p.radius = static_cast<double>(std::min(height, width)) / 2.0;
  if (!std::isfinite(p.cx) || !std::isfinite(p.cy) || !std::isfinite(p.radius))
    fail_config("the pupil centre and radius must be finite numbers of pixels");
  const double tol = 1e-9;
  const double left = p.cx - p.radius, right = p.cx + p.radius;
  const double top = p.cy - p.radius, bottom = p.cy + p.radius;
  if (left < -0.5 - tol || top < -0.5 - tol || right > static_cast<double>(width) - 0.5 + tol ||
      bottom > static_cast<double>(height) - 0.5 + tol) {
    std::ostringstream s;
    s << "the pupil (centre column " << p.cx << ", row " << p.cy << ", radius " << p.radius
      << " px) reaches beyond the " << height << "x" << width << " frame";
    fail_config(s.str());
  }
  return p;
}

ZernikeFit::ZernikeFit(std::size_t height, std::size_t width, ZernikeFitOptions options)
    : h_(height), w_(width), J_(options.terms), y_axis_(options.y_axis) {
  pupil_ = resolved_pupil(height, width, options.pupil);
  const int max_terms = terms_up_to_order(max_radial_order);
  if (J_ < 1 || J_ > max_terms)
    fail_config("Zernike terms must be between 1 and " + std::to_string(max_terms) + ", got " + std::to_string(J_));
  const double cx = pupil_.cx, cy = pupil_.cy, R = pupil_.radius;
  const double ys = y_axis_ == YAxis::up ? -1.0 : 1.0;
  const std::size_t J = static_cast<std::size_t>(J_);
  basis_ = std::make_shared<const detail::SampledBasis>(
      detail::disk_support(height, width, cx, cy, R), J_, [cx, cy, R, ys, J](double col, double row, double* out) {
        zernike_basis((col - cx) / R, ys * (row - cy) / R, std::span<double>(out, J));
      });
}

ZernikeFit::~ZernikeFit() = default;
ZernikeFit::ZernikeFit(const ZernikeFit&) = default;
ZernikeFit& ZernikeFit::operator=(const ZernikeFit&) = default;

std::size_t ZernikeFit::pupil_pixels() const noexcept { return basis_->count(); }

bool ZernikeFit::in_pupil(std::size_t row, std::size_t col) const noexcept {
  const double dx = static_cast<double>(col) - pupil_.cx, dy = static_cast<double>(row) - pupil_.cy;
  return row < h_ && col < w_ && dx * dx + dy * dy <= pupil_.radius * pupil_.radius;
}

void ZernikeFit::check(ImageView<const float> v, std::size_t ncoef, const Workspace& ws) const {
  if (v.height() != h_ || v.width() != w_)
    fail_config("Zernike fit planned for " + std::to_string(h_) + "x" + std::to_string(w_) + " frames, got " +
                std::to_string(v.height()) + "x" + std::to_string(v.width()));
  if (ncoef != static_cast<std::size_t>(J_))
    fail_config("Zernike fit has " + std::to_string(J_) + " terms, coefficient array holds " + std::to_string(ncoef));
  if (ws.a.size() != static_cast<std::size_t>(J_)) fail_config("Zernike fit workspace was made for another fit");
}

void ZernikeFit::fit(ImageView<const float> data, std::span<double> c, Workspace& ws) const {
  check(data, c.size(), ws);
  basis_->project(data, ws.a.data());
  for (double v : ws.a)
    if (!std::isfinite(v)) fail_input("the data to fit has non-finite values inside the Zernike pupil");
  basis_->solve(ws.a.data());
  basis_->to_raw(ws.a.data(), c.data());
}

void ZernikeFit::synthesize(std::span<const double> c, ImageView<float> out, Workspace& ws) const {
  check(out, c.size(), ws);
  basis_->from_raw(c.data(), ws.a.data());
  basis_->synthesize(ws.a.data(), out);
}

void ZernikeFit::subtract(ImageView<const float> in, std::span<const double> c, ImageView<float> out,
                          Workspace& ws) const {
  check(in, c.size(), ws);
  check(out, c.size(), ws);
  basis_->from_raw(c.data(), ws.a.data());
  basis_->subtract(in, ws.a.data(), out);
}

} // namespace wavestack::wavefront
