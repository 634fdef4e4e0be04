#pragma once
// Off-axis demodulation by the Fourier-transform method (Takeda, Ina &
// Kobayashi, JOSA 72(1) 156 (1982); Cuche, Marquet & Depeursinge, Appl. Opt.
// 39(23) 4070 (2000)): forward FFT of the hologram, keep one order inside a
// circular mask, move its carrier to DC, inverse FFT on a smaller grid.
//
// Output convention (the thing to rely on):
//   For a hologram I = |R|² + |O|² + O·R* + O*·R with |R| = 1 and
//   R = exp(−i2π(fy·y + fx·x)) (see carrier.hpp), Order::plus1 returns O and
//   Order::minus1 returns O*, sampled on the crop grid: output pixel (p, q)
//   is the band-limited value of the field at hologram pixel coordinates
//   (p·h/ch, q·w/cw), i.e. the same top-left origin with pitch
//   dy' = h·dy/ch, dx' = w·dx/cw (object space). With a reference of
//   amplitude |R| ≠ 1 the output is |R|·O. The sub-bin part of the carrier is
//   removed exactly by a phase ramp, so a correct carrier leaves no tilt.
//
// Steps of apply(): r2c FFT (h×(w/2+1), negative column frequencies from
// S(−ky,−kx) = conj S(ky,kx)); gather the masked lobe around the integer
// carrier bin into a ch×cw array with the carrier at index 0 (FFT order),
// weights including 1/(h·w); in-place inverse c2c FFT; multiply by the ramp
// exp(−i2π(δy·p/ch + δx·q/cw)), δ = exact − integer carrier bin. The mask
// weights, the gather tables and the ramp are computed at construction;
// apply() is a tight loop that allocates nothing and may run concurrently
// with one Workspace per thread.
//
// Mask: a circle in physical spatial frequency around the exact carrier of
// the chosen order, weight 1 up to `radius`, then a raised-cosine taper
//   ½[1 + cos(π (r − radius)/(soft_edge·radius))]
// out to radius·(1 + soft_edge), 0 beyond. Bins of the mask that fall beyond
// the spectrum edge (or outside the crop when the crop is capped at the
// hologram size) are dropped, with a warning.
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/fft/fft.hpp"
#include "wavestack/sideband/carrier.hpp"

#include <cstddef>
#include <cstdint>
#include <memory>
#include <vector>

namespace wavestack::sideband {

struct DemodulatorOptions {
  /// Mask radius in cycles/m (object space). 0 = automatic:
  /// NA/λ0 when numerical_aperture > 0, else radius_fraction × carrier distance.
  double radius = 0;
  /// Fraction of the carrier distance used when radius and NA are not given.
  /// 1/3 is the largest that cannot overlap the zero order (DESIGN.md); a
  /// larger mask radius is accepted with a warning.
  double radius_fraction = 1.0 / 3.0;
  /// Objective NA (> 0 sets the automatic radius NA/λ0, λ0 = grid wavelength).
  double numerical_aperture = 0;
  /// Width of the raised-cosine taper as a fraction of the radius (>= 0).
  double soft_edge = 0.1;
  /// Zero-order exclusion radius in cycles/m; 0 = automatic, the rule of
  /// dc_exclusion_radius() (2·NA/λ0 with an NA, else a fraction of Nyquist).
  /// A carrier inside it is a configuration error.
  double dc_exclusion = 0;
};

class Demodulator {
public:
  /// Plan demodulation of h×w holograms sampled on `hologram_grid`.
  /// Throws Error(config) for zero sizes, a bad grid, a non-positive radius
  /// or radius fraction, a negative soft edge, an NA without wavelength, or
  /// a carrier inside the zero-order exclusion. Warns (log::warn, once per
  /// configuration) when the radius exceeds 1/3 of the carrier distance, when
  /// the mask reaches the zero order, and when the mask is clipped.
  Demodulator(std::size_t h, std::size_t w, const Grid& hologram_grid, const Carrier& carrier,
              Order order, DemodulatorOptions options = {});

  std::size_t height() const noexcept { return h_; }
  std::size_t width() const noexcept { return w_; }
  std::size_t crop_height() const noexcept { return ch_; }
  std::size_t crop_width() const noexcept { return cw_; }
  Order order() const noexcept { return order_; }
  const Grid& hologram_grid() const noexcept { return grid_; }
  /// Grid of the output field: pitch h·dy/ch, w·dx/cw; same wavelength,
  /// medium index and plane as the hologram.
  const Grid& output_grid() const noexcept { return out_grid_; }
  /// Mask radius and outer (end of taper) radius, cycles/m.
  double radius() const noexcept { return radius_; }
  double outer_radius() const noexcept { return outer_; }
  /// Zero-order exclusion radius the carrier was checked against, cycles/m.
  double dc_exclusion() const noexcept { return dc_excl_; }
  /// Centre of the demodulated lobe in bins of the h×w spectrum: integer bin
  /// (crop index 0) and the sub-bin residual removed by the ramp. For the −1
  /// order these are the negated +1 values.
  long center_ky() const noexcept { return cy_; }
  long center_kx() const noexcept { return cx_; }
  double residual_ky() const noexcept { return dy_res_; }
  double residual_kx() const noexcept { return dx_res_; }
  /// True when part of the mask was dropped (beyond the spectrum edge or
  /// outside a crop capped at the hologram size).
  bool clipped() const noexcept { return clipped_; }
  /// Mask weights in [0, 1] in crop layout (FFT order, carrier at (0, 0)),
  /// without the 1/(h·w) factor; dropped bins are 0.
  ImageView<const float> mask() const noexcept { return mask_.view(); }

  /// Scratch for one thread, sized at construction.
  struct Workspace {
    Image<float> input;     ///< h×w copy, used when the hologram view is strided or unaligned
    Image<cfloat> spectrum; ///< h×(w/2+1) r2c spectrum
    Image<cfloat> crop;     ///< ch×cw gathered lobe, then its inverse FFT
  };
  Workspace make_workspace() const;

  /// First half of apply(), exposed for inspection: r2c FFT of `hologram`
  /// into ws.spectrum and the masked lobe into ws.crop, i.e.
  ///   ws.crop(i, j) = mask(i, j) · S(cy + a, cx + b) / (h·w),
  /// a = signed_bin(i, ch), b = signed_bin(j, cw), S the unnormalised DFT.
  void gather(ImageView<const float> hologram, Workspace& ws) const;

  /// Demodulate one h×w hologram into `out` (ch×cw, any stride). Size
  /// mismatches throw Error(input). Cost: one h×w r2c FFT, one ch×cw c2c
  /// FFT and O(ch·cw) gather/ramp work; a strided or unaligned hologram view
  /// is first copied into ws.input.
  void apply(ImageView<const float> hologram, ImageView<cfloat> out, Workspace& ws) const;

private:
  struct Tap {
    std::uint32_t dst; ///< crop index i·cw + j
    std::uint32_t src; ///< r2c spectrum index row·(w/2+1) + col
    float weight;      ///< mask weight / (h·w)
  };

  std::size_t h_, w_, ch_ = 0, cw_ = 0;
  Grid grid_, out_grid_;
  Order order_;
  double radius_ = 0, outer_ = 0, dc_excl_ = 0;
  long cy_ = 0, cx_ = 0;
  double dy_res_ = 0, dx_res_ = 0;
  bool clipped_ = false;
  Image<float> mask_;
  std::vector<Tap> direct_, mirrored_; ///< mirrored: value = conj(S[src])
  Image<cfloat> ramp_;
  std::shared_ptr<const fft::R2C> fwd_;
  std::shared_ptr<const fft::C2C> inv_;
};

} // namespace wavestack::sideband
