#pragma once
// Autofocus search: score S planes from one forward spectrum, refine the best
// one to well below the step, and say how sure the result is.
//
// Planned once for (h, w, grid, from, to, step, options): the coarse
// distances are from + i·step, i = 0..S-1, S = floor((to - from)/step) + 1
// (the last one is <= to). The angular spectrum transfer function of each
// coarse plane and of the 2·refine_levels small refinement offsets comes
// from propagate's shared cache (cached_transfer: a quarter table of
// (ph/2+1)·(pw/2+1)·8 bytes, shared with any stack or stage over the same
// planes; 81 planes of 512x512 unpadded hold 43 MB), plus two cached FFT
// plans.
//
// Per frame (run):
//  1. background: with Background::mean the frame mean b is subtracted and
//     added back after propagation as b·exp(i 2π n z/λ0) — the exact
//     propagation of a constant (the DC bin of the angular spectrum transfer
//     function [derived]) — which by linearity is the same as padding the
//     frame with its mean instead of zeros when pad_factor > 1, so the frame
//     border is not a sharp edge that is "in focus" at z = 0 (with the
//     default pad_factor 1 the propagation is periodic and this step changes
//     nothing but round-off);
//  2. one forward FFT of the zero-padded frame, then per plane one pass
//     that writes spectrum × H(z_i) over H's support (zeros elsewhere) into
//     the thread's buffer, one inverse FFT in place, and the metric on the
//     ROI read straight from the buffer's top-left h×w corner — the values
//     of AngularSpectrum::forward_spectrum + apply_spectrum, bit for bit
//     (tests/focus/test_sweep.cpp) — planes in parallel with TBB (one
//     workspace slot per thread of the arena);
//  3. the curve is judged (analyse_curve below): sure or unsure;
//  4. refinement (sure curves only): dyadic bracket halving around the best
//     coarse plane c with bracket [c - step, c + step]: level j evaluates
//     c ± step/2^j (two propagations, run in parallel), the best of the three
//     becomes the centre (for a unimodal curve the bracket keeps the
//     extremum); after L = refine_levels levels a parabola through the final
//     three points (spacing step/2^L) gives the distance. The field at c + δ
//     is propagated from the spectrum moved to c (multiplied by H(c)) with
//     the planned offset transfer function H(δ); the band limit is then that
//     of c (the product of both), not recomputed for c + δ — the
//     Matsushima–Shimobaba limit changes by O((Δz/window)²) only. Cost: 2·L
//     inverse FFTs plus up to L-1 spectrum multiplications. Accuracy
//     (tests/focus/test_search.cpp, noise-free discs at off-grid distances,
//     step 0.5 µm, L = 5): refined within 0.005 µm (amplitude) and 0.027 µm
//     (phase) of the truth, against 0.04 µm for the parabola alone
//     (refine_levels = 0); the rest is the metric's own offset.
//
// Cost per frame (tests/bench/bench_focus_sweep.cpp, 512x512, 81 planes,
// AVX-512, a busy 2-core machine): about 1.25x the bare 91 inverse FFTs.
// Of the 0.25, the multiply pass is 0.13..0.17 (bound by memory: the
// spectrum, the plane's table and the buffer, each 0.5..2 MB), the metric
// ~0.08 (tamura-gradient and its checkerboard split in one pass, ~0.2 ns
// per pixel), the forward FFT, the background and the refinement's moves
// the rest.
//
// Unsure results have distance = NaN (never a made-up number) and a reason.
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/focus/metric.hpp"

#include <cstddef>
#include <limits>
#include <memory>
#include <span>
#include <vector>

namespace wavestack::focus {

namespace detail {
class Engine;
struct EngineWorkspace;
} // namespace detail

/// Which extremum of the curve is focus.
enum class Extremum {
  automatic, ///< the metric's sense; for Sense::depends the clearer of max and min
  maximum,
  minimum
};

/// How the field outside the frame is treated by the padded propagation.
enum class Background {
  mean, ///< as if padded with the frame mean (default; see step 1 above)
  zero  ///< plain zero padding
};

/// Why a result is unsure (Unsure::none when it is sure).
enum class Unsure {
  none,
  edge,    ///< the extremum is at the first or last plane searched
  flat,    ///< the curve's span is at float round-off level (see analyse_curve)
  noise,   ///< the peak's prominence is not above the curve's noise (snr < min_snr)
  invalid, ///< the curve has non-finite values (e.g. an all-zero field)
  no_object ///< object focus: no object was found in the frame
};
const char* to_string(Unsure u) noexcept;

struct SearchOptions {
  /// Focus metric (metric.hpp). Default auto_select = tamura_gradient.
  Metric metric = Metric::auto_select;
  /// Which extremum is focus. Default automatic (see Extremum).
  Extremum extremum = Extremum::automatic;
  /// Region of interest in output pixels; default whole frame. Must lie
  /// inside the frame (Error(config)).
  Roi roi = {};
  /// Padded FFT size = good_size(ceil(pad_factor·n)) per axis, >= 1.
  /// Default 1: periodic propagation. For scoring planes this is better
  /// than zero (or mean) padding: a padded frame has a border — noise and
  /// structure end there — that is sharp at z = 0 and pulls amplitude
  /// metrics to z = 0 in object-free frames (measured: amplitude-variance
  /// and gradient-energy reported noise-only 128x128 frames as "sure" with
  /// pad 1.5, none with pad 1); wrapped defocus rings stay centred on their
  /// object. The cost grows with the padded area.
  double pad_factor = 1.0;
  /// Matsushima–Shimobaba band limit (propagate/angular_spectrum.hpp).
  bool band_limit = true;
  /// Default Background::mean.
  Background background = Background::mean;
  /// Refinement levels L (0..20, default 5): resolution step/2^L, cost 2·L
  /// extra inverse FFTs per sure result. 0 = parabola on the coarse peak.
  int refine_levels = 5;
  /// The peak must stand min_snr times the curve's noise above the higher
  /// of its two side minima (default 12; see analyse_curve). Measured with
  /// tamura-gradient on 128x128 frames, NA 0.75, pitch 0.25 µm, pupil-limited
  /// noise σ = 0.02, 81 planes, noise split in 3 px blocks (split_tile): 60
  /// object-free frames gave snr median 4.9, max 8.2; 60 discs of radius
  /// 1.5..2.5 µm (amplitude, phase, mixed, ±15 µm) gave snr >= 14.3. >= 0.
  double min_snr = 12.0;
  /// Curves whose span is below flat_tolerance·max|value| are flat
  /// (default 1e-6: float round-off of the pixel sums). >= 0.
  double flat_tolerance = 1e-6;
  /// Radius (cycles/m) of the field's spectrum: the coherent cut-off
  /// NA/λ0 of the microscope. Sets the default split_tile. 0 (default) =
  /// unknown: the grid's Nyquist frequency, as for a field the sideband
  /// stage cropped to its band.
  double band = 0.0;
  /// Side (pixels) of the checkerboard blocks that split the ROI into two
  /// interleaved halves for the noise estimate (analyse_curve). Blocks as
  /// wide as the noise's correlation length keep the halves' noise nearly
  /// independent; smaller ones share every object more evenly between the
  /// halves — an object the halves see differently leaves its own curve in
  /// their difference, which then looks like noise. 0 (default) =
  /// split_block_for(grid, band). Measured with tamura-gradient, 128x128
  /// frames, NA 0.75, pitch 0.25 µm, noise σ = 0.02, 81 planes, 60 frames
  /// each (object-free: snr max; single discs of radius 1.5..2.5 µm at
  /// ±15 µm: snr min, unsure count): blocks of 8 px 7.2 / 5.4, 16 unsure;
  /// 3 px (split_block_for) 8.2 / 14.3, none unsure; 2 px 11.6 / 29, none
  /// unsure but object-free frames close to min_snr. spectral_energy splits
  /// its frequency bins instead (metric.hpp).
  std::size_t split_tile = 0;
  /// spectral_energy band (cycles/m), 0 = defaults (metric.hpp).
  double spectral_band_low = 0.0, spectral_band_high = 0.0;
};

/// Verdict on one focus curve (for a given sense).
struct CurveVerdict {
  std::size_t peak = 0;      ///< index (into the span given) of the extremum
  int sign = +1;             ///< +1: focus is the maximum, -1: the minimum
  bool sure = false;
  Unsure reason = Unsure::invalid;
  double prominence = 0;     ///< sign·(peak - higher of the two side minima)
  double noise = 0;          ///< noise of the curve (same units)
  double snr = 0;            ///< prominence / noise
  double dominance = 0;      ///< 1 - (second largest prominence)/prominence, in [0, 1]
  double confidence = 0;     ///< dominance·(1 - exp(-snr/min_snr)) when sure, else 0
};

/// Judge a curve. `curve`: the values of consecutive planes. `split`: for
/// each plane half the difference of the metric on the two checkerboard
/// halves of the ROI (same length, or empty). For pure noise this has the
/// same standard deviation as the curve's own fluctuation [derived: the
/// halves are independent and the curve is their mean], while an object
/// seen by both halves cancels in it, up to a scaled copy of its curve when
/// the halves share it unevenly; that copy is removed by a least-squares fit
/// split ≈ α + β·curve, and the noise is 1.4826·MAD of the residual
/// (Hampel's consistent scale estimate [common practice]). Without a split
/// the noise is 1.4826·median|second difference|/sqrt(6) (a white-noise
/// estimate, weaker for noise correlated along z). `level`: the metric's
/// magnitude for a field of this energy (metric_level), so that a curve of
/// round-off around 0 is flat; the scale is max(max|curve|, level). The
/// noise is floored at 1e-7·scale (float round-off). Rules, in order:
/// non-finite → invalid; span ≤ flat_tolerance·scale → flat; peak at the
/// first or last index → edge; snr < min_snr → noise; otherwise sure.
/// Prominence is the topographic one: height above the higher of the
/// lowest points on either side (scipy.signal.peak_prominences' definition).
CurveVerdict analyse_curve(std::span<const double> curve, std::span<const double> split, int sign,
                           const SearchOptions& options, double level = 0.0);
/// Magnitude of `metric` for a field of rms amplitude `rms`: rms for
/// integrated_amplitude, rms² for the variance and energy metrics, 1 for the
/// dimensionless Tamura and spectral metrics.
double metric_level(Metric metric, double rms) noexcept;
/// analyse_curve for the sense(s) options.extremum allows for `metric`:
/// with two candidates the sure one wins, both sure → higher snr.
CurveVerdict judge_curve(std::span<const double> curve, std::span<const double> split, Metric metric,
                         const SearchOptions& options, double level = 0.0);

/// Result of one search. Buffers keep their capacity when a result is
/// reused, so steady-state runs allocate nothing.
struct FocusResult {
  /// Refined focus distance (m, object space, from the frame's plane);
  /// NaN when !sure.
  double distance = std::numeric_limits<double>::quiet_NaN();
  double confidence = 0;     ///< CurveVerdict::confidence, in [0, 1]
  bool sure = false;
  Unsure reason = Unsure::invalid;
  int sign = +1;             ///< +1 focus taken as the maximum, -1 as the minimum
  double snr = 0;            ///< CurveVerdict::snr
  std::size_t peak = 0;      ///< coarse plane index of the extremum (into distances)
  std::size_t first = 0, last = 0; ///< planes evaluated: [first, last]
  std::vector<double> distances;   ///< the S coarse distances (m)
  std::vector<double> curve;       ///< S metric values; NaN for planes not evaluated
  std::size_t propagations = 0;    ///< inverse FFTs used (coarse + refinement)
};

/// Noise-split block side for a field whose spectrum is limited to radial
/// frequencies <= band (cycles/m; the coherent cut-off NA/λ0 of the
/// microscope; 0 or more than the grid's Nyquist frequency: the grid's
/// Nyquist frequency): the first zero of the field's amplitude correlation,
/// 0.61/band (the jinc of a disc-shaped band, the coherent Airy radius
/// 0.61·λ0/NA [common practice]), in pixels of the finer axis, rounded up,
/// at least 2. 0.25 µm pitch at NA 0.75, 632.8 nm: 3; 0.345 µm: 2.
std::size_t split_block_for(const Grid& grid, double band);

class Search {
public:
  /// Plan a search of h×w fields on `grid` over [from, to] with `step` (m).
  /// Error(config) for an empty field, bad grid, non-finite or reversed
  /// range, step <= 0, fewer than 3 or more than 100000 planes, a ROI
  /// outside the frame or options out of range.
  Search(std::size_t h, std::size_t w, const Grid& grid, double from, double to, double step,
         SearchOptions options = {});
  ~Search();
  Search(Search&&) noexcept;
  Search& operator=(Search&&) noexcept;

  std::size_t planes() const noexcept;
  std::span<const double> distances() const noexcept;
  double step() const noexcept;
  std::size_t height() const noexcept;
  std::size_t width() const noexcept;
  std::size_t padded_height() const noexcept;
  std::size_t padded_width() const noexcept;
  const SearchOptions& options() const noexcept { return options_; }
  Metric metric() const noexcept { return metric_; }
  /// Index of the coarse plane nearest to `distance` (clamped).
  std::size_t nearest_plane(double distance) const noexcept;

  /// Per-call scratch: the padded input, its spectrum, the refinement
  /// spectrum (ph×pw each), and one slot (a ph×pw buffer for the product
  /// and its inverse FFT, metric scratch) per thread of the TBB arena it is
  /// made in. Make it in the arena that runs the search.
  class Workspace {
  public:
    Workspace();
    ~Workspace();
    Workspace(Workspace&&) noexcept;
    Workspace& operator=(Workspace&&) noexcept;
    /// Data pointers of every buffer (tests check they stay the same).
    std::vector<const void*> buffers() const;

  private:
    friend class Search;
    friend class Tracker;
    std::unique_ptr<detail::EngineWorkspace> engine;
    std::vector<Moments> halves; ///< 2 per plane: the two checkerboard halves
    std::vector<double> split;   ///< per plane
  };
  Workspace make_workspace() const;

  /// Search all S planes of `field` (h×w, the frame's plane is z = 0).
  /// Thread-safe with one workspace per concurrent call; allocates nothing
  /// once `out` has held a result of this search (FFTW may malloc small
  /// scratch internally, see fft.hpp).
  void run(ImageView<const cfloat> field, FocusResult& out, Workspace& ws) const;
  FocusResult run(ImageView<const cfloat> field, Workspace& ws) const;
  /// Search planes [first, last] only (first <= last < planes(), at least 3
  /// planes); edge now means the window's edge. Used by Tracker.
  void run_window(ImageView<const cfloat> field, std::size_t first, std::size_t last, FocusResult& out,
                  Workspace& ws) const;

private:
  SearchOptions options_;
  Metric metric_;
  std::shared_ptr<const detail::Engine> engine_;
  std::unique_ptr<MetricEvaluator> evaluator_;
};

} // namespace wavestack::focus
