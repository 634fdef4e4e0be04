#pragma once
// Transfer functions on a padded frequency grid, and the process-wide cache
// that lets propagators, z-stacks and sweeps over the same planes share them.
//
// Two kinds (λ = λ0/n the wavelength in the medium, k = 2π/λ, f² = fx²+fy²):
//  * angular_spectrum: H = exp(i 2π z sqrt(1/λ² − f²)), 0 where f > 1/λ
//    (evanescent), band-limited after Matsushima & Shimobaba, Opt. Express
//    17(22), 19662 (2009): |fx| <= 1/(λ sqrt((2 Δfx z)² + 1)), same for fy.
//    Bit-identical to AngularSpectrum::transfer().
//  * fresnel (paraxial): H = e^{ikz} exp(−iπ λ z f²) (Goodman, Introduction
//    to Fourier Optics, 3rd ed., ch. 4), kept at every frequency (no
//    evanescent cut: it is the paraxial model), band-limited by the same
//    Nyquist argument applied to its own chirp: the phase πλz f² has local
//    frequency λ|z| f along f, which must stay <= 1/(2Δf), so
//    |fx| <= 1/(2 Δfx λ |z|) (derived; the paraxial limit of the
//    Matsushima–Shimobaba bound for large z).
// Δf = 1/(n·d) is the frequency step of the padded axis of length n and pitch
// d. Values include the 1/(ph·pw) normalisation of the unnormalised inverse
// FFT, are evaluated in double and rounded to float once.
//
// Storage: H depends on fx² and fy² only and bins k and n−k hold ±f, so only
// the quarter of bins 0..ph/2 × 0..pw/2 is stored ((ph/2+1)·(pw/2+1) values,
// about a quarter of the full grid) and multiply() mirrors it on the fly.
// A 41-plane stack at 1200² padded holds 41 × 2.9 MB.
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"

#include <cstddef>
#include <cstdint>
#include <memory>
#include <vector>

namespace wavestack::propagate {

enum class TransferKind { angular_spectrum, fresnel };

class TransferFunction {
public:
  /// Evaluate H for a ph×pw padded grid with the pitch of `grid` over
  /// `distance` (m, negative = backwards). `band_limit` = false only for
  /// tests. Cost: (ph/2+1)(pw/2+1) square roots, sines and cosines in double.
  /// Prefer cached_transfer(), which shares equal transfer functions.
  TransferFunction(TransferKind kind, std::size_t ph, std::size_t pw, const Grid& grid, double distance,
                   bool band_limit = true);

  TransferKind kind() const noexcept { return kind_; }
  std::size_t padded_height() const noexcept { return ph_; }
  std::size_t padded_width() const noexcept { return pw_; }
  double distance() const noexcept { return z_; }
  /// Band-limit frequencies used (cycles/m), +infinity when off or unbounded.
  double band_limit_fx() const noexcept { return ulim_x_; }
  double band_limit_fy() const noexcept { return ulim_y_; }

  /// H·(1/(ph·pw)) at FFT bin (ky, kx) of the full grid (0 <= ky < ph, 0 <= kx < pw).
  cfloat at(std::size_t ky, std::size_t kx) const noexcept {
    return quarter_(ky <= ph_ / 2 ? ky : ph_ - ky, kx <= pw_ / 2 ? kx : pw_ - kx);
  }
  /// The stored quarter, bins 0..ph/2 × 0..pw/2.
  const Image<cfloat>& quarter() const noexcept { return quarter_; }
  /// The full ph×pw table in FFT bin order (tests and diagnostics; allocates).
  Image<cfloat> full() const;

  /// spectrum[i] *= H[i] over a contiguous ph×pw array in FFT bin order.
  void multiply(cfloat* spectrum) const noexcept;
  /// out[i] = in[i] * H[i]; `in` and `out` must not overlap.
  void multiply(const cfloat* in, cfloat* out) const noexcept;
  /// The same, but reading and writing only where H may be non-zero
  /// (support()), for an `out` whose other bins already hold zeros:
  /// `written[ky]` (ph entries, 0 for a zeroed buffer) records the support
  /// last written in row ky and is updated; bins of a previous, wider
  /// support are re-zeroed. For a microscope grid whose Nyquist frequency
  /// exceeds n/λ0 most bins are evanescent, so this skips most of the
  /// memory traffic. `out` must keep its contents between calls (use it as
  /// the input of an out-of-place inverse FFT).
  void multiply_support(const cfloat* in, cfloat* out, std::uint32_t* written) const noexcept;
  /// Columns 0..support(qy)-1 of quarter row qy may be non-zero, the rest
  /// are 0 (H is zero beyond the band limit and, for the angular spectrum,
  /// beyond 1/λ; both cuts grow with |fx|).
  std::size_t support(std::size_t qy) const noexcept { return support_[qy]; }

  /// Bytes held by the table.
  std::size_t bytes() const noexcept { return quarter_.size() * sizeof(cfloat); }

private:
  TransferKind kind_;
  std::size_t ph_, pw_;
  double z_;
  double ulim_x_, ulim_y_;
  Image<cfloat> quarter_;
  std::vector<std::uint32_t> support_; ///< per quarter row
};

/// The transfer function for these settings from the process-wide cache,
/// made on a miss. Thread-safe; equal settings (kind, ph, pw, grid.dy,
/// grid.dx, grid.wavelength, grid.medium_index, distance, band_limit —
/// grid.plane is ignored) return the SAME object while anyone holds it, so
/// two stages or sweeps over the same planes share memory. Construction runs
/// outside the cache lock (two threads missing at once may both compute;
/// one result is kept).
///
/// Memory bound: besides the tables its users hold, the cache keeps the
/// most recently used released tables alive up to a byte budget (least
/// recently used dropped first; default 256 MiB), so a sweep re-planned with
/// the same planes finds them again. Tables in use are never dropped.
std::shared_ptr<const TransferFunction> cached_transfer(TransferKind kind, std::size_t ph, std::size_t pw,
                                                        const Grid& grid, double distance, bool band_limit = true);

struct TransferCacheStats {
  std::size_t live = 0;           ///< distinct tables alive (held by users or retained)
  std::size_t live_bytes = 0;
  std::size_t retained = 0;       ///< tables the cache itself keeps alive (LRU)
  std::size_t retained_bytes = 0; ///< <= budget
  std::size_t hits = 0, misses = 0;
};
TransferCacheStats transfer_cache_stats();
/// Byte budget for tables kept alive by the cache alone (0 = keep none).
void set_transfer_cache_budget(std::size_t bytes);
std::size_t transfer_cache_budget();
/// Drop the retained tables and reset the counters (tables in use stay
/// shared).
void clear_transfer_cache();

} // namespace wavestack::propagate
