#include "wavestack/propagate/method.hpp"

#include "detail.hpp"

#include "wavestack/core/log.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

namespace wavestack::propagate {

const char* method_name(Method m) noexcept {
  switch (m) {
  case Method::fresnel: return "fresnel";
  case Method::fresnel_single_fft: return "fresnel-single-fft";
  case Method::angular_spectrum: break;
  }
  return "angular-spectrum";
}

bool parse_method(std::string_view text, std::optional<Method>* out) {
  if (text == "auto") {
    *out = std::nullopt;
    return true;
  }
  for (Method m : {Method::angular_spectrum, Method::fresnel, Method::fresnel_single_fft})
    if (text == method_name(m)) {
      *out = m;
      return true;
    }
  return false;
}

std::size_t padded_length(std::size_t n, double factor) { return detail::padded_size(n, factor); }

double auto_pad_factor(std::size_t h, std::size_t w, const Grid& grid, double distance, double max_frequency,
                       bool band_limit) {
  detail::check_setup("auto padding", h, w, grid, distance);
  if (!(std::isfinite(max_frequency) && max_frequency >= 0.0))
    fail_config("auto padding: max_frequency must be >= 0 cycles/m (0 = Nyquist), got " +
                detail::number(max_frequency));
  if (distance == 0.0) return 1.0;
  const double lambda = grid.medium_wavelength();
  const double fm = max_frequency > 0.0 ? max_frequency : std::numeric_limits<double>::infinity();
  // Padded window needed along one axis, in units of the window L = n·d.
  const double sz = std::sqrt(lambda * std::fabs(distance)); // Fresnel-zone scale of the band-limit edge
  auto needed = [&](double d, double d_other, std::size_t n) {
    const double L = static_cast<double>(n) * d;
    const double fa = std::min(1.0 / (2.0 * d), fm);
    const double fb = std::min(1.0 / (2.0 * d_other), std::isinf(fm) ? HUGE_VAL : std::sqrt(std::max(0.0, fm * fm - fa * fa)));
    const double s2 = lambda * lambda * (fa * fa + fb * fb);
    const double a = s2 >= 1.0 ? HUGE_VAL : std::fabs(distance) * lambda * fa / std::sqrt(1.0 - s2);
    if (!band_limit) return (L + a) / L;
    if (a <= L) return std::max(L + a, 2.0 * a + 4.0 * sz) / L;
    return (2.0 * L + 4.0 * sz) / L;
  };
  const double raw = std::max(needed(grid.dx, grid.dy, w), needed(grid.dy, grid.dx, h));
  const double cap = 4.0;
  if (raw > cap) {
    log::warn("auto padding: the propagation over " + detail::length(distance) + " needs a padded window " +
                  detail::number(raw, 3) + " times the field" +
                  (band_limit ? " (for the band limit's margin)" : " (the band limit is off)") +
                  "; the padding is capped at 4x, so the outer part of the window may carry wrap-around or "
                  "band-limit ripple",
              "propagate:auto-pad-cap:" + detail::shape(h, w) + ":" + detail::number(grid.dx, 9) + ":" +
                  detail::number(grid.dy, 9) + ":" + (band_limit ? "bl" : "nobl"));
    return cap;
  }
  return raw;
}

namespace detail {

double resolve_padding(Method method, std::size_t h, std::size_t w, const Grid& grid, double distance,
                       const PropagatorOptions& o) {
  switch (o.padding.mode) {
  case Padding::Mode::none: return 1.0;
  case Padding::Mode::factor:
    if (!(std::isfinite(o.padding.value) && o.padding.value >= 1.0))
      fail_config("propagate: the padding factor must be at least 1 (got " + number(o.padding.value) + ")");
    return o.padding.value;
  case Padding::Mode::automatic: break;
  }
  // Single-FFT Fresnel needs no padding against wrap-around (it is a direct
  // transform; zero padding only interpolates its output more finely).
  if (method == Method::fresnel_single_fft) return 1.0;
  return auto_pad_factor(h, w, grid, distance, o.max_frequency, o.band_limit);
}

} // namespace detail

namespace {

using detail::frequency;
using detail::length;
using detail::number;

/// "3.45 um" or "dx = 3.45 um, dy = 2 um".
std::string pitch_pair(double x, double y) {
  if (x == y) return length(x);
  return "dx = " + length(x) + ", dy = " + length(y);
}

std::string percent(double f) { return number(100.0 * f, 3) + "%"; }

/// Everything the criterion needs for one method at one distance.
struct Figures {
  double pad = 1;
  std::size_t ph = 0, pw = 0;
  double crit_px = 0, crit_py = 0; // λ|z|/L_p
  double crit_sx = 0, crit_sy = 0; // λ|z|/L
  double eff_dx = 0, eff_dy = 0;   // pitch in the criterion: max(Δx, 1/(2 f_max))
  bool tf_sampled = true;          // effective pitch >= λ|z|/L_p on both axes
  bool chirp_sampled = true;       // Δx <= λ|z|/L on both axes
  double ulim_x = HUGE_VAL, ulim_y = HUGE_VAL;
  double kept = 1;                 // bandwidth fraction kept (smaller axis)
  double f_edge = 0;               // radial band edge used for the paraxial error
  double paraxial = 0;             // rad
};

Figures figures(Method m, std::size_t h, std::size_t w, const Grid& g, double z, const PropagatorOptions& o) {
  Figures f;
  f.pad = detail::resolve_padding(m, h, w, g, z, o);
  f.ph = detail::padded_size(h, f.pad);
  f.pw = detail::padded_size(w, f.pad);
  const double lambda = g.medium_wavelength(), az = std::fabs(z);
  f.crit_px = lambda * az / (static_cast<double>(f.pw) * g.dx);
  f.crit_py = lambda * az / (static_cast<double>(f.ph) * g.dy);
  f.crit_sx = lambda * az / (static_cast<double>(w) * g.dx);
  f.crit_sy = lambda * az / (static_cast<double>(h) * g.dy);
  f.chirp_sampled = g.dx <= f.crit_sx && g.dy <= f.crit_sy;
  // Band the transfer function must be sampled up to: the grid's Nyquist
  // frequency, or max_frequency when that is lower (H needs no samples
  // beyond the field's band). Its effective pitch 1/(2 f_b) takes Δx's place
  // in the criterion.
  const double nx = 1.0 / (2.0 * g.dx), ny = 1.0 / (2.0 * g.dy);
  const double fm = o.max_frequency > 0.0 ? o.max_frequency : HUGE_VAL;
  const double bx = std::min(nx, fm), by = std::min(ny, fm);
  f.eff_dx = 1.0 / (2.0 * bx);
  f.eff_dy = 1.0 / (2.0 * by);
  f.tf_sampled = f.eff_dx >= f.crit_px && f.eff_dy >= f.crit_py;
  double ex = bx, ey = by;
  if (m != Method::fresnel_single_fft && o.band_limit) {
    const double dfx = 1.0 / (static_cast<double>(f.pw) * g.dx), dfy = 1.0 / (static_cast<double>(f.ph) * g.dy);
    double px = bx, py = by; // the band that can propagate at all
    if (m == Method::angular_spectrum) {
      f.ulim_x = detail::asm_band_limit(lambda, dfx, z);
      f.ulim_y = detail::asm_band_limit(lambda, dfy, z);
      px = std::min(bx, 1.0 / lambda); // beyond 1/λ waves are evanescent (H = 0)
      py = std::min(by, 1.0 / lambda);
    } else {
      f.ulim_x = detail::fresnel_band_limit(lambda, dfx, z);
      f.ulim_y = detail::fresnel_band_limit(lambda, dfy, z);
    }
    ex = std::min(bx, f.ulim_x);
    ey = std::min(by, f.ulim_y);
    f.kept = std::min(std::min(1.0, f.ulim_x / px), std::min(1.0, f.ulim_y / py));
  }
  f.f_edge = std::sqrt(ex * ex + ey * ey);
  if (o.max_frequency > 0.0) f.f_edge = std::min(f.f_edge, o.max_frequency);
  f.paraxial = m == Method::angular_spectrum ? 0.0 : detail::paraxial_error(lambda, f.f_edge, z);
  return f;
}

/// The pitch as the transfer-function criterion sees it.
std::string tf_pitch(const Grid& g, const Figures& f) {
  std::string t = "pitch " + pitch_pair(g.dx, g.dy);
  if (f.eff_dx > g.dx || f.eff_dy > g.dy)
    t += " (effective pitch 1/(2 f_max) = " + pitch_pair(f.eff_dx, f.eff_dy) + " for the field's band)";
  return t;
}

std::string at_z(double z) { return " at z = " + length(z); }

std::string critical_padded(const Grid& g, const Figures& f) {
  return "critical pitch λz/L_p = " + pitch_pair(f.crit_px, f.crit_py) + " (padded window " +
         pitch_pair(static_cast<double>(f.pw) * g.dx, static_cast<double>(f.ph) * g.dy) + ")";
}

std::string critical_source(std::size_t h, std::size_t w, const Grid& g, const Figures& f) {
  return "critical pitch λz/L = " + pitch_pair(f.crit_sx, f.crit_sy) + " (source window " +
         pitch_pair(static_cast<double>(w) * g.dx, static_cast<double>(h) * g.dy) + ")";
}

std::string bandwidth(const Figures& f) {
  const double u = std::min(f.ulim_x, f.ulim_y);
  if (!std::isfinite(u)) return "no band limit";
  return "the band limit " + frequency(u) + " keeps " + percent(f.kept) + " of the bandwidth per axis";
}

std::string output_grid(const Grid& g, double z, const Figures& f) {
  const double lambda = g.medium_wavelength(), az = std::fabs(z);
  return "output pitch λz/(P·Δx) = " +
         pitch_pair(lambda * az / (static_cast<double>(f.pw) * g.dx), lambda * az / (static_cast<double>(f.ph) * g.dy)) +
         ", output window λz/Δx = " + pitch_pair(lambda * az / g.dx, lambda * az / g.dy);
}

std::string paraxial(const Figures& f, double tol) {
  return "paraxial phase error " + number(f.paraxial, 3) + " rad at the band edge " + frequency(f.f_edge) +
         " (tolerance " + number(tol, 3) + " rad)";
}

void fill(MethodChoice& c, const Figures& f) {
  c.pad_factor = f.pad;
  c.critical_dx_padded = f.crit_px;
  c.critical_dy_padded = f.crit_py;
  c.critical_dx_source = f.crit_sx;
  c.critical_dy_source = f.crit_sy;
  c.bandwidth_kept = f.kept;
  c.paraxial_error = f.paraxial;
}

} // namespace

MethodChoice choose_method(std::size_t h, std::size_t w, const Grid& grid, double distance,
                           const PropagatorOptions& o) {
  detail::check_setup("propagate", h, w, grid, distance);
  if (!(std::isfinite(o.paraxial_tolerance) && o.paraxial_tolerance > 0.0))
    fail_config("propagate: paraxial_tolerance must be a positive phase in rad (got " +
                number(o.paraxial_tolerance) + ")");
  if (!(std::isfinite(o.max_frequency) && o.max_frequency >= 0.0))
    fail_config("propagate: max_frequency must be >= 0 cycles/m (0 = Nyquist), got " + number(o.max_frequency));
  const std::string pitch = "pitch " + pitch_pair(grid.dx, grid.dy);
  MethodChoice c;

  if (!o.method) { // auto
    if (distance == 0.0) {
      c.method = Method::angular_spectrum;
      fill(c, figures(c.method, h, w, grid, distance, o));
      c.reason = "angular spectrum: distance 0, the field is copied unchanged";
      return c;
    }
    const Figures as = figures(Method::angular_spectrum, h, w, grid, distance, o);
    if (as.tf_sampled) {
      c.method = Method::angular_spectrum;
      fill(c, as);
      c.reason = "angular spectrum (exact): " + tf_pitch(grid, as) + " >= " + critical_padded(grid, as) + at_z(distance) +
                 ", so its transfer function is sampled up to Nyquist (" + bandwidth(as) + ")";
      return c;
    }
    const Figures sf = figures(Method::fresnel_single_fft, h, w, grid, distance, o);
    c.method = Method::fresnel_single_fft;
    fill(c, sf);
    c.auto_out_of_range = sf.paraxial > o.paraxial_tolerance;
    c.reason = "single-FFT Fresnel: " + tf_pitch(grid, as) + " < " + critical_padded(grid, as) + at_z(distance) +
               ", where the band-limited angular spectrum would keep only " + percent(as.kept) +
               " of the bandwidth per axis in a window that does not grow with z; the single-FFT " +
               output_grid(grid, distance, sf) + " holds the whole diffracted field; " +
               paraxial(sf, o.paraxial_tolerance) +
               (c.auto_out_of_range ? ", so waves near the band edge carry that phase error (set max_frequency "
                                      "to the field's real bandwidth, e.g. NA/wavelength, if it is smaller)"
                                    : "");
    return c;
  }

  c.method = *o.method;
  if (c.method == Method::fresnel_single_fft && distance == 0.0)
    fail_config("propagate: single-FFT Fresnel needs a non-zero distance (its output pitch λz/(N·Δx) would be 0)");
  const Figures f = figures(c.method, h, w, grid, distance, o);
  fill(c, f);
  switch (c.method) {
  case Method::angular_spectrum:
    if (distance == 0.0) {
      c.reason = "angular spectrum (requested): distance 0, the field is copied unchanged";
    } else if (f.tf_sampled) {
      c.reason = "angular spectrum (requested, in range): " + tf_pitch(grid, f) + " >= " + critical_padded(grid, f) +
                 at_z(distance) + " (" + bandwidth(f) + ")";
    } else {
      c.explicit_out_of_range = true;
      c.reason = "angular spectrum (requested) beyond its sampling range: " + tf_pitch(grid, f) + " < " + critical_padded(grid, f) + at_z(distance) + ", so " + bandwidth(f) +
                 " (exact inside the window, but the rest of the spreading field is lost; single-FFT Fresnel "
                 "would keep it)";
    }
    break;
  case Method::fresnel: {
    std::string problems;
    if (distance != 0.0 && !f.tf_sampled) {
      c.explicit_out_of_range = true;
      problems = tf_pitch(grid, f) + " < " + critical_padded(grid, f) + at_z(distance) + ", so " + bandwidth(f);
    }
    if (f.paraxial > o.paraxial_tolerance) {
      c.explicit_out_of_range = true;
      problems += (problems.empty() ? "" : "; ") + paraxial(f, o.paraxial_tolerance) + at_z(distance);
    }
    if (c.explicit_out_of_range)
      c.reason = "Fresnel transfer function (requested) out of range: " + problems;
    else
      c.reason = "Fresnel transfer function (requested, in range): " + tf_pitch(grid, f) + " >= " + critical_padded(grid, f) +
                 at_z(distance) + ", " + paraxial(f, o.paraxial_tolerance);
    break;
  }
  case Method::fresnel_single_fft: {
    std::string problems;
    if (!f.chirp_sampled) {
      c.explicit_out_of_range = true;
      const double lambda = grid.medium_wavelength(), az = std::fabs(distance);
      const double xa = lambda * az / (2.0 * grid.dx);
      problems = "its input chirp is undersampled: " + pitch + " > " + critical_source(h, w, grid, f) +
                 at_z(distance) + "; the chirp aliases beyond |x| = λz/(2Δx) = " + length(xa) + " (" +
                 percent(std::min(1.0, 2.0 * xa / (static_cast<double>(w) * grid.dx))) +
                 " of the window is alias-free) and the " + output_grid(grid, distance, f);
    }
    if (f.paraxial > o.paraxial_tolerance) {
      c.explicit_out_of_range = true;
      problems += (problems.empty() ? "" : "; ") + paraxial(f, o.paraxial_tolerance) + at_z(distance);
    }
    if (c.explicit_out_of_range)
      c.reason = "single-FFT Fresnel (requested) out of range: " + problems;
    else
      c.reason = "single-FFT Fresnel (requested, in range): " + pitch + " <= " + critical_source(h, w, grid, f) +
                 at_z(distance) + ", " + output_grid(grid, distance, f) + ", " + paraxial(f, o.paraxial_tolerance);
    break;
  }
  }
  return c;
}

namespace detail {

void warn_if_out_of_range(const MethodChoice& c, std::size_t h, std::size_t w, const Grid& g, const char* what) {
  if (!c.explicit_out_of_range && !c.auto_out_of_range) return;
  const std::string key = std::string("propagate:") + what + ":" + method_name(c.method) +
                          (c.auto_out_of_range ? ":auto" : ":explicit") + ":" + shape(h, w) + ":" + number(g.dx, 9) +
                          ":" + number(g.dy, 9) + ":" + number(g.wavelength, 9) + ":" + number(g.medium_index, 9);
  log::warn(std::string(what) + ": " + c.reason, key);
}

} // namespace detail

} // namespace wavestack::propagate
