#pragma once
// Focus metrics: one number per reconstructed plane whose extremum marks the
// sharp plane. Every metric is evaluated on a region of interest (ROI) of a
// complex field u plus a constant background b (the search propagates the
// field minus its mean and adds the mean back, see search.hpp), v = u + b,
// with amplitude A = |v|.
//
// Pixel quantities use neighbours of the ROI pixel when they exist in the
// frame (a one-pixel halo may be read outside the ROI); forward differences
// are defined on pixels with x < w-1 and y < h-1, the Laplacian on pixels one
// away from every frame border. Sums are accumulated in double from float
// pixels (STYLE: single precision pixels, double sums).
//
// Metric                 value                                   focus at
// integrated_amplitude   ⟨A⟩ (∬|U| per pixel)                    depends ¹
//   Dubois, Schockaert, Callens, Yourassowsky, Opt. Express 14(13), 5895
//   (2006) [confirmed]: minimum at focus for a pure amplitude object,
//   maximum for a pure phase object. ∬|U|² is conserved by propagation, so
//   the L1 norm is used.
// amplitude_variance     var(A)                                  depends ¹
//   Dubois et al. (2006), same paper [from memory]: opposite sense to the
//   integrated amplitude (over a whole frame var(A) = ⟨A²⟩ - ⟨A⟩², with ⟨A²⟩
//   conserved [derived]): maximum for amplitude, minimum for phase objects.
// tamura_amplitude       sqrt(σ(A)/⟨A⟩)                         depends ¹
//   Tamura coefficient of the amplitude: Memmolo, Distante, Paturzo,
//   Finizio, Ferraro, Javidi, Opt. Lett. 36(10), 1945 (2011) [from memory]:
//   extremum at focus (maximum for amplitude objects, minimum for phase
//   objects, whose amplitude contrast vanishes at focus).
// tamura_gradient        sqrt(σ(G)/⟨G⟩), G = |∇v|                maximum
//   Tamura coefficient of the gradient modulus of the COMPLEX field, a
//   sparsity measure of its edges: Tamamitsu, Zhang, Wang, Wu, Ozcan, arXiv
//   (2017) [confirmed]. G² = |v(y,x+1)-v(y,x)|² + |v(y+1,x)-v(y,x)|².
//   Amplitude and phase edges are both sharpest at focus, so the sense does
//   not depend on the object type; tests/focus/test_default_metric.cpp checks
//   amplitude, phase and mixed discs (all within 0.07 µm with noise). Caveat
//   (measured there): a smooth phase bump without edges is a weak lens, and
//   its gradient is sparsest past the object plane (+1.2 µm for a 0.5 rad
//   Gaussian bump of 2 µm radius); the amplitude-minimum criteria are exact
//   for such pure phase objects.
// gradient_energy        ⟨|∇A|²⟩ (forward differences)            depends ¹
//   Amplitude gradient energy [common practice]; compared for phase objects
//   by Langehanenberg, Kemper, Dirksen, von Bally, Appl. Opt. 47(19), D176
//   (2008) [from memory]: maximum for amplitude, minimum for phase objects.
//   (The gradient energy of the complex field is conserved by propagation
//   within the band [derived], so only the amplitude version is useful.)
// laplacian_variance     var(∇²A), 5-point Laplacian              depends ¹
//   [common practice]; Langehanenberg et al. (2008) [from memory].
// spectral_energy        Σ_band log(1 + |F{A-⟨A⟩}|/(√n·⟨A⟩)) / n_band  depends ¹
//   Log-weighted spectral energy of the amplitude over a frequency band, in
//   the spirit of the weighted spectral analysis compared by Langehanenberg
//   et al. (2008) [from memory]; this exact form is ours [common practice].
//   F is the unnormalised DFT of the ROI zero-padded to good FFT sizes, n the
//   ROI pixel count (|F|/√n has the units of a pixel standard deviation by
//   Parseval, so the argument is a relative contrast). Costs one real FFT of
//   the ROI per plane. Note: in object-free frames it sees the frame's own
//   border (noise ends there, sharp at z = 0) and may call such frames sure
//   (measured: 4 of 8 noise-only 128x128 frames).
//
// ¹ "depends": the sense differs between amplitude and phase objects; a
//   search with Extremum::automatic takes whichever extremum (maximum or
//   minimum) is the clearer one (search.hpp).
//
// Metric::auto_select resolves to tamura_gradient, the only metric here
// whose sense is the same for amplitude, phase and mixed objects.
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/fft/fft.hpp"

#include <cstddef>
#include <memory>
#include <optional>
#include <span>
#include <string_view>

namespace wavestack::focus {

enum class Metric {
  auto_select,          ///< resolves to tamura_gradient (see above)
  integrated_amplitude, ///< ⟨|U|⟩, Dubois et al. 2006
  amplitude_variance,   ///< var(|U|), Dubois et al. 2006
  tamura_amplitude,     ///< Tamura coefficient of |U|, Memmolo et al. 2011
  tamura_gradient,      ///< Tamura coefficient of |∇U|, Tamamitsu et al. 2017
  gradient_energy,      ///< ⟨|∇|U||²⟩
  laplacian_variance,   ///< var(∇²|U|)
  spectral_energy,      ///< log-weighted band energy of the spectrum of |U|
};

/// Which extremum of the metric marks focus.
enum class Sense {
  maximum, ///< focus is the maximum for every object type
  minimum, ///< focus is the minimum for every object type
  depends  ///< the sense depends on the object (amplitude vs phase)
};

/// Static description of a metric.
struct MetricInfo {
  Metric metric;
  std::string_view name;   ///< pipeline-file spelling, e.g. "tamura-gradient"
  Sense sense;
  std::string_view source; ///< short citation with status tag
};

/// auto_select → tamura_gradient; every other metric maps to itself.
Metric resolve(Metric m) noexcept;
const MetricInfo& info(Metric m) noexcept;
/// Every concrete metric (auto_select excluded), in enum order.
std::span<const Metric> all_metrics() noexcept;
/// Parse a pipeline-file name ("auto", "integrated-amplitude",
/// "amplitude-variance", "tamura-amplitude", "tamura-gradient",
/// "gradient-energy", "laplacian-variance", "spectral-energy"); nullopt for
/// anything else.
std::optional<Metric> parse_metric(std::string_view name) noexcept;
/// True for metrics computed from the first two moments of a pixel quantity
/// (all but spectral_energy); these can be summed over tiles (objects.hpp).
bool is_moment_metric(Metric m) noexcept;

/// The SIMD kernels the focus module runs in this process: "avx512", "avx2"
/// or "sse2" (the widest the CPU has; WAVESTACK_FOCUS_ISA=avx2 or sse2 caps
/// it, so tests can run the narrower kernels on a wider machine).
std::string_view simd_kernels() noexcept;

/// Running moments of a pixel quantity q: count, Σq, Σq² (double).
struct Moments {
  double n = 0, s1 = 0, s2 = 0;
  Moments& operator+=(const Moments& o) noexcept {
    n += o.n;
    s1 += o.s1;
    s2 += o.s2;
    return *this;
  }
};

/// The metric value from the moments of its pixel quantity (moment metrics
/// only). NaN when the moments are empty or the mean is not positive where
/// a Tamura coefficient divides by it.
double metric_value(Metric m, const Moments& q) noexcept;

/// Rectangle in output pixels: rows [y, y+height), columns [x, x+width).
/// height == 0 or width == 0 means "the whole frame".
struct Roi {
  std::size_t y = 0, x = 0, height = 0, width = 0;
  bool whole() const noexcept { return height == 0 || width == 0; }
  bool operator==(const Roi&) const = default;
};

/// Evaluates one metric on an ROI of h×w fields. Planned once (the spectral
/// metric plans a real FFT of the ROI size rounded up to good sizes);
/// operator() is const, thread-safe with one Scratch per thread and
/// allocates nothing.
class MetricEvaluator {
public:
  /// `metric`: any Metric (auto_select is resolved). `h`, `w`: frame size.
  /// `roi`: rectangle inside the frame (whole() = full frame); Error(config)
  /// when it leaves the frame. `grid`: pitch, used by spectral_energy's
  /// band. `band_low`, `band_high`: spectral_energy band in cycles/m
  /// (radial frequency); 0 = defaults (lowest non-zero bin, and the Nyquist
  /// frequency). Ignored by the other metrics.
  MetricEvaluator(Metric metric, std::size_t h, std::size_t w, const Roi& roi, const Grid& grid,
                  double band_low = 0.0, double band_high = 0.0);

  Metric metric() const noexcept { return metric_; }
  const Roi& roi() const noexcept { return roi_; }

  struct Scratch {
    Image<float> row;       ///< one row of the pixel quantity
    Image<float> mask;      ///< one row of the checkerboard block mask
    Image<float> amplitude; ///< spectral: ROI amplitude, padded
    Image<cfloat> spectrum; ///< spectral: r2c output
  };
  Scratch make_scratch() const;

  /// Metric of v = u + background over the ROI; `u` is the whole h×w frame.
  /// For spectral_energy, `split` (when not null) receives half the
  /// difference of the band energy over the bins with even and with odd
  /// kx + ky (two interleaved halves of the spectrum: independent for noise,
  /// alike for a compact object whose spectrum is smooth), the noise probe of
  /// search.hpp's analyse_curve; other metrics leave it untouched.
  double operator()(ImageView<const cfloat> u, cfloat background, Scratch& s, double* split = nullptr) const;

  /// Moments of the pixel quantity of a moment metric over the rectangle
  /// [y0,y1)×[x0,x1), summed into `tiles` (row-major grid of tiles_x
  /// columns, tile side `tile` pixels, tile (0,0) at (ty0, tx0)). Also
  /// max-accumulates the complex gradient energy |∇v|² into `map` (h×w,
  /// may be empty) when `map` is not empty. Used by the object focuser.
  /// With `block` > 0 every tile has two entries: tiles[2k] sums the pixels
  /// of the even and tiles[2k+1] those of the odd blocks of a checkerboard
  /// of block×block pixels with block (0,0) at pixel (0,0) — the noise
  /// split of search.hpp, inside each tile.
  void accumulate(ImageView<const cfloat> u, cfloat background, std::size_t y0, std::size_t x0, std::size_t y1,
                  std::size_t x1, std::size_t tile, std::size_t ty0, std::size_t tx0, std::size_t tiles_x,
                  Moments* tiles, ImageView<float> map, Scratch& s, std::size_t block = 0) const;

  /// Moments of a moment metric over the ROI split into a checkerboard of
  /// tile×tile blocks (block (0,0) at the ROI's corner): `a` gets the blocks
  /// with even block-row + block-column, `b` the odd ones. Same values as
  /// accumulate() over tiles and summed by parity, in one pass.
  void accumulate_split(ImageView<const cfloat> u, cfloat background, std::size_t tile, Moments& a, Moments& b,
                        Scratch& s) const;

private:
  double spectral(ImageView<const cfloat> u, cfloat background, Scratch& s, double* split) const;

  Metric metric_;
  std::size_t h_, w_;
  Roi roi_;
  std::size_t fh_ = 0, fw_ = 0;          ///< spectral FFT size
  std::shared_ptr<const fft::R2C> r2c_;  ///< spectral only
  Image<unsigned char> band_;            ///< spectral: 1 where a bin is in the band (fh × fw/2+1)
  std::size_t band_count_ = 0;           ///< number of bins in the band, counting Hermitian twins
  std::size_t band_even_ = 0;            ///< of which with even kx + ky
};

} // namespace wavestack::focus
