#pragma once
// Angular spectrum refocus in object space (DESIGN.md physical model):
//   H(fx,fy) = exp(i 2π z sqrt((n/λ0)^2 - fx^2 - fy^2)),
// evanescent components (fx^2+fy^2 > (n/λ0)^2) set to zero, band-limited
// after Matsushima & Shimobaba, Opt. Express 17(22), 19662 (2009):
//   |fx| <= 1/(λ sqrt((2 Δfx z)^2 + 1)), same for fy, with Δf the frequency
// step of the padded grid, and zero-padded against circular wrap-around.
// The transfer function (with the 1/N normalisation folded in) is computed
// once at construction; apply() runs one forward FFT, one multiply and one
// inverse FFT on per-thread workspace buffers and allocates nothing.
#include "wavestack/core/field.hpp"
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/fft/fft.hpp"

#include <cstddef>
#include <memory>

namespace wavestack::propagate {

struct AngularSpectrumOptions {
  /// Padded size = good_size(ceil(pad_factor * n)) per axis; 1 = no padding.
  double pad_factor = 2.0;
  /// Apply the Matsushima–Shimobaba band limit (on by default; off only for tests).
  bool band_limit = true;
};

class AngularSpectrum {
public:
  /// Plan a propagation of an h×w field sampled on `grid` over `distance`
  /// metres (negative = back-propagation).
  AngularSpectrum(std::size_t h, std::size_t w, const Grid& grid, double distance,
                  AngularSpectrumOptions options = {});

  std::size_t height() const noexcept { return h_; }
  std::size_t width() const noexcept { return w_; }
  std::size_t padded_height() const noexcept { return ph_; }
  std::size_t padded_width() const noexcept { return pw_; }
  double distance() const noexcept { return z_; }
  /// The grid of the output: the input grid with plane += distance.
  Grid output_grid() const noexcept { return out_grid_; }
  /// Band-limit frequencies actually used (cycles/m), for logs and tests.
  double band_limit_fx() const noexcept { return ulim_x_; }
  double band_limit_fy() const noexcept { return ulim_y_; }

  /// Scratch buffers for one thread.
  struct Workspace {
    Image<cfloat> padded;
    Image<cfloat> spectrum;
  };
  Workspace make_workspace() const;

  /// Propagate `in` (h×w) into `out` (h×w). `in` and `out` may be the same.
  void apply(ImageView<const cfloat> in, ImageView<cfloat> out, Workspace& ws) const;

private:
  std::size_t h_, w_, ph_, pw_;
  double z_;
  Grid out_grid_;
  double ulim_x_ = 0, ulim_y_ = 0;
  Image<cfloat> transfer_; ///< H·(1/(ph·pw)), in FFT bin order
  std::shared_ptr<const fft::C2C> fwd_, inv_;
};

} // namespace wavestack::propagate
