#pragma once
// Carrier of an off-axis hologram: where the +1 order sits in the spectrum.
//
// Hologram model and sign convention (DESIGN.md contract, Takeda, Ina &
// Kobayashi, JOSA 72(1) 156 (1982); Cuche, Marquet & Depeursinge, Appl. Opt.
// 39(23) 4070 (2000)):
//   I = |R|² + |O|² + O·R* + O*·R,  R = |R| exp(−i2π(fy·y + fx·x)),
// so O·R* = |R|·O·exp(+i2π fc·r) is the lobe around +fc in the forward FFT
// (FFTW/numpy sign exp(−i2π k n/N)). The +1 order is the lobe whose carrier
// has fx > 0 (fx = 0: fy > 0); the −1 order is its mirror at −fc, which holds
// O* (the twin image).
//
// Frequencies are in object space: cycles per metre with the Grid pitch
// (camera pitch / magnification). Bin units: a carrier at fractional bin k
// along an axis of n samples and pitch d has frequency k/(n·d).
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"

#include <cmath>
#include <cstddef>
#include <string>

namespace wavestack::sideband {

enum class Order {
  plus1,  ///< the lobe at +fc: the object wave O
  minus1  ///< the lobe at −fc: its conjugate O* (twin image)
};

/// "+1" or "-1" (the pipeline file spelling).
const char* to_string(Order order) noexcept;

struct Carrier {
  /// Signed fractional frequency bins of the +1 order in the h×w spectrum of
  /// the frame the carrier was measured on (row, column). Informative: the
  /// Demodulator works from fy, fx so a carrier can be reused on any size.
  double ky = 0, kx = 0;
  /// Carrier frequency in object space, cycles per metre (+1 convention).
  double fy = 0, fx = 0;
  /// Peak magnitude divided by the median spectrum magnitude outside the
  /// zero-order exclusion (Hann-windowed frame), for the log. Roughly: > 100
  /// a clean carrier, < 8 no clear carrier (find_carrier warns).
  double strength = 0;

  /// Distance of the carrier from the zero order, cycles per metre.
  double distance() const noexcept { return std::hypot(fy, fx); }
  /// Fringe period in pixels of the frame's grid along the carrier direction.
  double period_pixels(const Grid& grid) const noexcept {
    return 1.0 / std::hypot(fy * grid.dy, fx * grid.dx);
  }
};

/// One line for the log: bins, cycles/mm, period, strength.
std::string describe(const Carrier& carrier, const Grid& grid);

/// Carrier from object-space frequencies for h×w frames on `grid`, flipped
/// to the +1 convention if needed (e.g. a carrier named by an instrument
/// profile). strength is set to 0 (not measured).
Carrier carrier_from_frequency(double fy, double fx, std::size_t h, std::size_t w, const Grid& grid);

/// Object-space cutoff of an imaging system of numerical aperture `na`:
/// NA/λ0 cycles per metre, λ0 the vacuum wavelength (coherent imaging
/// cutoff [common practice]). Throws Error(config) for na <= 0 or λ0 <= 0.
double radius_from_na(double na, double wavelength);

/// Default zero-order exclusion when neither a radius nor an NA is given:
/// this fraction of the smaller Nyquist frequency min(1/(2dy), 1/(2dx)).
inline constexpr double default_dc_fraction = 0.125;

/// Radius (cycles/m) of the zero-order region that cannot hold the carrier:
///  * `dc_exclusion` when > 0;
///  * else 2·NA/λ0 when numerical_aperture > 0 (the autocorrelation |O|² of
///    an object limited to NA/λ0 extends to twice that); λ0 = `wavelength`
///    if > 0, else grid.wavelength (Error(config) when neither is set);
///  * else default_dc_fraction · min(1/(2dy), 1/(2dx)).
double dc_exclusion_radius(const Grid& grid, double numerical_aperture, double wavelength,
                           double dc_exclusion);

struct CarrierSearchOptions {
  /// Zero-order exclusion radius in cycles/m; 0 = automatic (see
  /// dc_exclusion_radius). The 3×3 bins around DC are always excluded.
  double dc_exclusion = 0;
  /// Objective NA; > 0 makes the automatic exclusion 2·NA/λ0.
  double numerical_aperture = 0;
  /// Vacuum wavelength (m) for the NA rule; 0 = grid.wavelength.
  double wavelength = 0;
  /// Target accuracy of the sub-bin refinement, in bins (default 1e-3).
  double precision = 1e-3;
};

/// Find the +1 carrier of one hologram (run once at planning time, on the
/// background hologram when there is one, else on the first frame).
///
/// Method: subtract the mean, apply a symmetric Hann window (its low
/// sidelobes keep the zero order and the twin from biasing the peak), take
/// the r2c spectrum and pick the strongest bin outside the zero-order
/// exclusion; then refine to sub-bin accuracy by maximising the magnitude of
/// the 2-D DTFT on successively finer 11×11 grids of frequencies around the
/// peak, each grid evaluated as a matrix product (the upsampled-DFT idea of
/// Guizar-Sicairos, Thurman & Fienup, Opt. Lett. 33(2) 156 (2008) [from
/// memory]), down to `precision` bins. The result follows the +1 convention;
/// a refined |kx| below `precision` is set to 0 so that the fy > 0 rule
/// applies to vertical carriers.
///
/// Errors: an empty frame or one smaller than 8×8, a frame with NaN/Inf pixels, a flat frame (all
/// pixels equal, e.g. all zero) or a frame with no spectral peak outside the
/// zero order (the strongest bin there is not a local maximum but the flank
/// of the zero order, as for smooth illumination without fringes) throw
/// Error(input); bad grid or options throw Error(config).
/// A weak peak (strength < 8) is accepted with a warning.
///
/// Cost: one r2c FFT plus about 6 refinement grids of 11·h·w complex
/// multiply-adds each in double (≈ 0.45 s for 2048×2048 on one core);
/// planning time only, never per frame.
Carrier find_carrier(ImageView<const float> hologram, const Grid& grid,
                     const CarrierSearchOptions& options = {});

} // namespace wavestack::sideband
