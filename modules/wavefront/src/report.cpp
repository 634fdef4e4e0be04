#include "wavestack/wavefront/report.hpp"

#include "sampled_basis.hpp"
#include "wavestack/core/error.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <string>

namespace wavestack::wavefront {

double strehl_marechal(double sigma) noexcept {
  const double s2 = sigma * sigma;
  if (s2 >= 2.0) return 0.0;
  const double t = 1.0 - s2 / 2.0;
  return t * t;
}

double strehl_exponential(double sigma) noexcept { return std::exp(-sigma * sigma); }

namespace {

ZernikeFit make_fit(std::size_t h, std::size_t w, const WavefrontOptions& o) {
  if (!(o.wavelength > 0) || !std::isfinite(o.wavelength))
    fail_config("the wavefront report needs the vacuum wavelength (a positive length)");
  if (o.terms < 3)
    fail_config("the wavefront report needs at least 3 Zernike terms (piston and tilts), got " +
                std::to_string(o.terms));
  if (!(o.strehl_validity >= 0 && o.strehl_validity <= 1))
    fail_config("strehl_validity must lie in [0, 1]");
  ZernikeFitOptions f;
  f.terms = o.terms;
  f.pupil = o.pupil;
  f.y_axis = o.y_axis;
  return ZernikeFit(h, w, f);
}

} // namespace

WavefrontAnalyzer::WavefrontAnalyzer(std::size_t height, std::size_t width, WavefrontOptions options)
    : opt_(options), fit_(make_fit(height, width, options)) {
  // Moments of (1, x, y) over the pupil pixels for the plane fit.
  double m[9] = {0, 0, 0, 0, 0, 0, 0, 0, 0};
  for (const detail::Run& run : fit_.basis_->support().runs) {
    const double y = fit_.pupil_y(run.y);
    for (std::uint32_t c = run.x0; c < run.x1; ++c) {
      const double x = fit_.pupil_x(c);
      const double v[3] = {1.0, x, y};
      for (int i = 0; i < 3; ++i)
        for (int k = 0; k < 3; ++k) m[i * 3 + k] += v[i] * v[k];
    }
  }
  if (!detail::cholesky(m, plane_L_, 3)) fail_config("the pupil is too small to fit a plane");
}

WavefrontReport WavefrontAnalyzer::make_report() const {
  WavefrontReport r;
  r.coefficients_nm.assign(static_cast<std::size_t>(fit_.terms()), 0.0);
  r.pupil_pixels = fit_.pupil_pixels();
  return r;
}

void WavefrontAnalyzer::analyze(ImageView<const float> phase, WavefrontReport& rep, Workspace& ws) const {
  const detail::SampledBasis& B = *fit_.basis_;
  const std::size_t J = static_cast<std::size_t>(fit_.terms());
  if (rep.coefficients_nm.size() != J) rep.coefficients_nm.assign(J, 0.0);
  fit_.check(phase, J, ws.fit);
  double* a = ws.fit.a.data();
  for (std::size_t k = 0; k < J; ++k) a[k] = 0;

  // Pass 1: projection on Q, plane moments, mean, extremes.
  double s1 = 0, sx = 0, sy = 0;
  float vmin = std::numeric_limits<float>::infinity(), vmax = -vmin;
  {
    const float* q = B.q();
    for (const detail::Run& run : B.support().runs) {
      const float* src = phase.row(run.y);
      const double y = fit_.pupil_y(run.y);
      double rs = 0, rx = 0;
      for (std::uint32_t c = run.x0; c < run.x1; ++c, q += J) {
        const float f = src[c];
        const double v = f;
        for (std::size_t k = 0; k < J; ++k) a[k] += v * q[k];
        rs += v;
        rx += v * fit_.pupil_x(c);
        vmin = std::min(vmin, f);
        vmax = std::max(vmax, f);
      }
      s1 += rs;
      sx += rx;
      sy += rs * y;
    }
  }
  if (!std::isfinite(s1) || !std::isfinite(a[0]))
    fail_input("the phase map has non-finite values inside the wavefront pupil");
  const double N = static_cast<double>(B.count());
  const double mean = s1 / N;
  double plane[3] = {s1, sx, sy};
  detail::cholesky_solve(plane_L_, plane, 3);
  B.solve(a); // a: coefficients on Q

  // Pass 2: deviations from the mean, from the plane and from the fit.
  double ss_mean = 0, ss_plane = 0, ss_fit = 0, sc = 0, ssin = 0;
  double tmin = std::numeric_limits<double>::infinity(), tmax = -tmin;
  {
    const float* q = B.q();
    const bool direct = opt_.direct_strehl;
    for (const detail::Run& run : B.support().runs) {
      const float* src = phase.row(run.y);
      const double yterm = plane[0] + plane[2] * fit_.pupil_y(run.y);
      double rc = 0, rsn = 0;
      for (std::uint32_t c = run.x0; c < run.x1; ++c, q += J) {
        const double v = src[c];
        double f = 0;
        for (std::size_t k = 0; k < J; ++k) f += a[k] * q[k];
        const double t = v - (yterm + plane[1] * fit_.pupil_x(c));
        const double d = v - mean, e = v - f;
        ss_mean += d * d;
        ss_plane += t * t;
        ss_fit += e * e;
        tmin = std::min(tmin, t);
        tmax = std::max(tmax, t);
        if (direct) {
          const float tf = static_cast<float>(t);
          rc += std::cos(tf);
          rsn += std::sin(tf);
        }
      }
      sc += rc;
      ssin += rsn;
    }
  }

  const double k = opt_.wavelength * 1e9 / (2.0 * M_PI); // nm per radian
  std::vector<double>& c = rep.coefficients_nm;
  B.to_raw(a, c.data());
  double sum1 = 0, sum3 = 0;
  for (std::size_t j = 0; j < J; ++j) {
    if (j >= 1) sum1 += c[j] * c[j];
    if (j >= 3) sum3 += c[j] * c[j];
    c[j] *= k;
  }
  rep.pupil_pixels = B.count();
  rep.pv_nm = (static_cast<double>(vmax) - static_cast<double>(vmin)) * k;
  rep.rms_nm = std::sqrt(ss_mean / N) * k;
  rep.pv_no_tilt_nm = (tmax - tmin) * k;
  const double sigma = std::sqrt(ss_plane / N);
  rep.rms_no_tilt_nm = sigma * k;
  rep.modal_rms_nm = std::sqrt(sum1) * k;
  rep.modal_rms_no_tilt_nm = std::sqrt(sum3) * k;
  rep.fit_residual_rms_nm = std::sqrt(ss_fit / N) * k;
  rep.sigma_rad = sigma;
  rep.strehl_marechal = strehl_marechal(sigma);
  rep.strehl_exponential = strehl_exponential(sigma);
  rep.strehl_direct = opt_.direct_strehl ? (sc * sc + ssin * ssin) / (N * N) : std::numeric_limits<double>::quiet_NaN();
  rep.strehl_reliable = rep.strehl_exponential >= opt_.strehl_validity;
}

} // namespace wavestack::wavefront
