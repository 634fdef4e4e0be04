#pragma once
// Synthetic phase maps for the wavefront tests (invented data).
#include "wavestack/core/image.hpp"
#include "wavestack/wavefront/zernike.hpp"
#include "wavestack/wavefront/zernike_fit.hpp"

#include <cmath>
#include <random>
#include <span>
#include <vector>

namespace wavefront_test {

using wavestack::Image;

/// Σ c_j Z_j on the pupil coordinates of `fit` (every pixel, also outside
/// the pupil, where the polynomials are simply continued), in double then
/// rounded to float.
inline Image<float> zernike_map(const wavestack::wavefront::ZernikeFit& fit, const std::vector<double>& c) {
  Image<float> img(fit.height(), fit.width());
  std::vector<double> z(c.size());
  for (std::size_t r = 0; r < img.height(); ++r)
    for (std::size_t col = 0; col < img.width(); ++col) {
      wavestack::wavefront::zernike_basis(fit.pupil_x(static_cast<double>(col)), fit.pupil_y(static_cast<double>(r)), z);
      double v = 0;
      for (std::size_t j = 0; j < c.size(); ++j) v += c[j] * z[j];
      img(r, col) = static_cast<float>(v);
    }
  return img;
}

/// Add white Gaussian noise of standard deviation sigma (fixed seed).
inline void add_noise(Image<float>& img, double sigma, unsigned seed) {
  std::mt19937 rng(seed);
  std::normal_distribution<double> n(0.0, sigma);
  for (float& v : img) v = static_cast<float>(v + n(rng));
}

} // namespace wavefront_test
