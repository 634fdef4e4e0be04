#pragma once
// Angular spectrum refocus in object space (DESIGN.md physical model):
//   H(fx,fy) = exp(i 2π z sqrt((n/λ0)^2 - fx^2 - fy^2)),
// evanescent components (fx^2+fy^2 > (n/λ0)^2) set to zero, band-limited
// after Matsushima & Shimobaba, Opt. Express 17(22), 19662 (2009):
//   |fx| <= 1/(λ sqrt((2 Δfx z)^2 + 1)), same for fy, with Δf the frequency
// step of the padded grid and λ = λ0/n the wavelength in the medium, and
// zero-padded against circular wrap-around.
// The transfer function (with the 1/N normalisation folded in) is computed
// once at construction; apply() runs one forward FFT, one multiply and one
// inverse FFT on per-thread workspace buffers and allocates nothing.
//
// Layout: the h×w field is written into the top-left corner of the zero
// padded ph×pw array and the top-left h×w of the result is cropped back.
// For a circular convolution this is the same as centred placement: the
// kernel is centred on bin (0,0), so output pixel (y,x) sees input pixel
// (y,x) at zero lateral offset either way. Frequencies of bin k along an
// axis of padded length n and pitch d are fft::bin_frequency(k, n, d).
//
// Sign convention: exp(+i k z) for a wave travelling towards +z
// (REFERENCES.md Conventions), so a positive distance propagates forward.
#include "wavestack/core/field.hpp"
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/fft/fft.hpp"
#include "wavestack/propagate/workspace.hpp"

#include <cstddef>
#include <memory>

namespace wavestack::propagate {

struct AngularSpectrumOptions {
  /// Padded size = good_size(ceil(pad_factor * n)) per axis; 1 = no padding
  /// beyond the next good FFT size (the propagation is then circular). 2 is
  /// enough for every distance: the band limit keeps only waves that stay
  /// inside the doubled window. Must be >= 1.
  double pad_factor = 2.0;
  /// Apply the Matsushima–Shimobaba band limit (on by default; off only for tests).
  bool band_limit = true;
};

class AngularSpectrum {
public:
  /// Plan a propagation of an h×w field sampled on `grid` over `distance`
  /// metres (negative = back-propagation). Throws Error(config) for a zero
  /// size, non-positive pitch, wavelength or index, a non-finite distance or
  /// pad_factor < 1. Cost: two FFT plans (cached) and one ph×pw transfer
  /// function evaluated in double.
  AngularSpectrum(std::size_t h, std::size_t w, const Grid& grid, double distance,
                  AngularSpectrumOptions options = {});

  std::size_t height() const noexcept { return h_; }
  std::size_t width() const noexcept { return w_; }
  std::size_t padded_height() const noexcept { return ph_; }
  std::size_t padded_width() const noexcept { return pw_; }
  double distance() const noexcept { return z_; }
  /// The grid of the output: the input grid with plane += distance.
  Grid output_grid() const noexcept { return out_grid_; }
  /// Band-limit frequencies actually used (cycles/m), for logs and tests;
  /// +infinity when the band limit is off.
  double band_limit_fx() const noexcept { return ulim_x_; }
  double band_limit_fy() const noexcept { return ulim_y_; }
  /// The transfer function H·(1/(ph·pw)) on the padded grid, in FFT bin order
  /// (for diagnostics and tests).
  const Image<cfloat>& transfer() const noexcept { return transfer_; }

  /// Scratch buffers for one thread (see workspace.hpp): `padded` holds the
  /// field in its top-left h×w corner and zeros elsewhere; the zeros are
  /// written once, by make_workspace(), and never overwritten. A workspace
  /// may be shared by propagators with the same padded size (e.g. the planes
  /// of a focus sweep); apply() re-zeroes `padded` when the previous user
  /// wrote a different corner size. The same type serves every propagator
  /// of this module (propagate::Workspace).
  using Workspace = propagate::Workspace;
  Workspace make_workspace() const;

  /// Propagate `in` (h×w) into `out` (h×w). `in` and `out` may be the same
  /// and may be strided views. With distance 0 this is an exact copy.
  /// Thread-safe with one workspace per thread; allocates nothing itself
  /// (FFTW may malloc small scratch inside its algorithms, see fft.hpp).
  void apply(ImageView<const cfloat> in, ImageView<cfloat> out, Workspace& ws) const;

  /// Spectrum reuse (focus sweeps): forward_spectrum() zero-pads `in` and
  /// transforms it into `spectrum` (ph×pw, unnormalised, FFT bin order);
  /// apply_spectrum() multiplies a copy by this propagator's H and returns
  /// the cropped field. Any propagator with the same h, w, padded size and
  /// pitch may produce the spectrum; `spectrum` is only read, so threads may
  /// share it. apply_spectrum at distance 0 removes evanescent content (H=0
  /// there) where apply() copies.
  Image<cfloat> make_spectrum() const { return Image<cfloat>(ph_, pw_); }
  void forward_spectrum(ImageView<const cfloat> in, Image<cfloat>& spectrum, Workspace& ws) const;
  void apply_spectrum(const Image<cfloat>& spectrum, ImageView<cfloat> out, Workspace& ws) const;

private:
  void check_field(ImageView<const cfloat> v, const char* what) const;
  void check_workspace(const Workspace& ws) const;
  void pad_and_transform(ImageView<const cfloat> in, cfloat* spectrum, Workspace& ws) const;
  void inverse_and_crop(ImageView<cfloat> out, Workspace& ws) const;

  std::size_t h_, w_, ph_, pw_;
  double z_;
  Grid out_grid_;
  double ulim_x_ = 0, ulim_y_ = 0;
  Image<cfloat> transfer_; ///< H·(1/(ph·pw)), in FFT bin order
  std::shared_ptr<const fft::PaddedC2C> fwd_; ///< forward of the zero-padded field
  std::shared_ptr<const fft::C2C> inv_;
};

} // namespace wavestack::propagate
