#pragma once
// Synthetic holographic-microscope fields for the focus tests (invented
// data): objects built in focus on a periodic canvas larger than the camera
// frame, pupil-limited to |f| <= NA/λ0 (coherent cut-off, Goodman, REFERENCES.md
// "Off-axis demodulation" [from memory]), defocused with the exact angular
// spectrum on the canvas (periodic, no padding) and cropped to the frame, so
// the frame border is a window on a wider scene as in a camera.
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/fft/fft.hpp"
#include "wavestack/propagate/angular_spectrum.hpp"

#include <algorithm>
#include <cmath>
#include <complex>
#include <functional>
#include <random>
#include <vector>

namespace focus_test {

using wavestack::cfloat;
using wavestack::Grid;
using wavestack::Image;

constexpr double lambda0 = 632.8e-9; // He-Ne (REFERENCES.md examples)
constexpr double n_water = 1.333;
constexpr double na = 0.75;
constexpr double pitch = 0.25e-6; // object-space pixel pitch (brief: 0.2–0.35 µm)
/// Depth of field λ0·n/NA² (Inoué & Spring, Video Microscopy (1997),
/// REFERENCES.md Autofocus criteria [common practice; from memory]): 1.4996 µm.
constexpr double depth_of_field = lambda0 * n_water / (na * na);
/// Tolerance of the found focus: one tenth of the depth of field [common practice].
constexpr double tolerance = depth_of_field / 10;

/// Radius of the fields' spectrum: the coherent cut-off NA/λ0 (pupil_limit).
constexpr double band = na / lambda0;

inline Grid grid() {
  Grid g;
  g.dy = g.dx = pitch;
  g.wavelength = lambda0;
  g.medium_index = n_water;
  return g;
}

/// One object of the synthetic scene, centred at (cy, cx) canvas metres from
/// the canvas centre, in focus at distance `focus` from the frame plane.
struct Object {
  enum Kind { amplitude_disc, phase_disc, phase_gauss, mixed_disc } kind;
  double cy = 0, cx = 0;  ///< offset from the canvas centre (m)
  double radius = 2e-6;   ///< disc radius or Gaussian 1/e radius (m)
  double absorb = 0.5;    ///< amplitude discs: 1 - transmission inside
  double phase = 1.0;     ///< phase objects: peak phase (rad)
  double focus = 0;       ///< distance from the frame plane at which it is sharp (m)
};

/// Transmission of one object at canvas point (y, x) in metres from the centre;
/// discs have a 1-pixel soft edge.
inline std::complex<double> transmission(const Object& o, double y, double x) {
  const double r = std::hypot(y - o.cy, x - o.cx);
  const double inside = std::clamp((o.radius - r) / pitch + 0.5, 0.0, 1.0);
  switch (o.kind) {
  case Object::amplitude_disc: return {1.0 - o.absorb * inside, 0.0};
  case Object::phase_disc: return std::polar(1.0, o.phase * inside);
  case Object::phase_gauss: return std::polar(1.0, o.phase * std::exp(-(r * r) / (o.radius * o.radius)));
  case Object::mixed_disc: return std::polar(1.0 - o.absorb * inside, o.phase * inside);
  }
  return {1.0, 0.0};
}

/// Zero the spectrum of `u` (periodic canvas) beyond |f| = NA/λ0.
inline void pupil_limit(Image<cfloat>& u) {
  const std::size_t h = u.height(), w = u.width();
  Image<cfloat> spec(h, w);
  wavestack::fft::plan_c2c(h, w, wavestack::fft::Direction::forward)->execute(u.data(), spec.data());
  const double fc = na / lambda0;
  const float norm = 1.0f / static_cast<float>(h * w);
  for (std::size_t ky = 0; ky < h; ++ky)
    for (std::size_t kx = 0; kx < w; ++kx) {
      const double fy = wavestack::fft::bin_frequency(ky, h, pitch), fx = wavestack::fft::bin_frequency(kx, w, pitch);
      spec(ky, kx) = std::hypot(fx, fy) <= fc ? spec(ky, kx) * norm : cfloat(0, 0);
    }
  wavestack::fft::plan_c2c(h, w, wavestack::fft::Direction::backward)->execute(spec.data(), u.data());
}

/// Periodic propagation of a canvas field by z (pad 1, band limit off: on a
/// periodic canvas nothing wraps that the scene would not wrap itself).
inline void propagate_canvas(Image<cfloat>& u, double z) {
  if (z == 0) return;
  wavestack::propagate::AngularSpectrumOptions o;
  o.pad_factor = 1.0;
  o.band_limit = false;
  wavestack::propagate::AngularSpectrum as(u.height(), u.width(), grid(), z, o);
  auto ws = as.make_workspace();
  as.apply(u, u, ws);
}

/// The h×w frame field (hologram plane z = 0) of the objects on a canvas of
/// canvas_factor times the frame size. Objects with different focus
/// distances are built plane by plane: the scene is propagated from each
/// object's plane to the next (objects met one after the other along z).
/// `noise` is the standard deviation of complex Gaussian noise (relative to
/// the unit background) added in the frame plane and pupil-limited like the
/// signal (as after sideband filtering); 0 = none.
inline Image<cfloat> make_frame(std::size_t h, std::size_t w, std::vector<Object> objects, double noise = 0,
                                unsigned seed = 1, std::size_t canvas_factor = 2) {
  const std::size_t ch = canvas_factor * h, cw = canvas_factor * w;
  Image<cfloat> u(ch, cw, cfloat(1, 0));
  // Light travels towards +z: it meets the object with the smallest focus
  // distance first; the frame plane is z = 0, an object sharp at distance d
  // sits at z = d, and the field reaches the frame by propagating by -z.
  std::sort(objects.begin(), objects.end(), [](const Object& a, const Object& b) { return a.focus < b.focus; });
  double z = objects.empty() ? 0.0 : objects.front().focus;
  for (const Object& o : objects) {
    propagate_canvas(u, o.focus - z); // from plane z to the object's plane
    z = o.focus;
    for (std::size_t y = 0; y < ch; ++y)
      for (std::size_t x = 0; x < cw; ++x) {
        const double py = (static_cast<double>(y) - static_cast<double>(ch) / 2) * pitch;
        const double px = (static_cast<double>(x) - static_cast<double>(cw) / 2) * pitch;
        const std::complex<double> v = std::complex<double>(u(y, x)) * transmission(o, py, px);
        u(y, x) = cfloat(static_cast<float>(v.real()), static_cast<float>(v.imag()));
      }
  }
  pupil_limit(u);
  propagate_canvas(u, -z); // object plane z -> frame plane 0
  if (noise > 0) {
    std::mt19937 rng(seed);
    std::normal_distribution<float> g(0.f, 1.f);
    Image<cfloat> nz(ch, cw);
    for (auto& v : nz) v = cfloat(g(rng), g(rng));
    pupil_limit(nz);
    // Pupil-limiting keeps the fraction π(NA/λ0)²·(pitch)² of the white
    // noise power; rescale to the requested standard deviation.
    double p = 0;
    for (const auto& v : nz) p += std::norm(std::complex<double>(v));
    const float s = static_cast<float>(noise / std::sqrt(p / static_cast<double>(nz.size())));
    for (std::size_t i = 0; i < u.size(); ++i) u.data()[i] += s * nz.data()[i];
  }
  Image<cfloat> frame(h, w);
  const std::size_t y0 = (ch - h) / 2, x0 = (cw - w) / 2;
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) frame(y, x) = u(y0 + y, x0 + x);
  return frame;
}

/// Frame pixel (row, column) of a canvas offset (m) for make_frame's crop.
inline double frame_pixel(double offset, std::size_t n) { return static_cast<double>(n) / 2 + offset / pitch; }

} // namespace focus_test
