#pragma once
// The per-thread scratch buffers shared by every single-plane propagator of
// this module (AngularSpectrum, TransferPropagator, FresnelSingleFFT).
#include "wavestack/core/image.hpp"

#include <cstddef>

namespace wavestack::propagate {

/// Scratch buffers for one thread, sized ph×pw (the padded size) by the
/// propagator's make_workspace(). `padded` holds the input field in its
/// top-left h×w corner and zeros elsewhere; the zeros are written once, by
/// make_workspace(), and never overwritten, because every method here
/// writes only that corner and transforms out of place. A workspace may
/// therefore be shared by any propagators with the same padded size (e.g.
/// the planes of a focus sweep, or different methods); apply() re-zeroes
/// `padded` when the previous user wrote a larger corner. Not thread-safe:
/// one workspace per thread.
struct Workspace {
  Image<cfloat> padded;   ///< ph×pw: input corner + zero padding
  Image<cfloat> spectrum; ///< ph×pw: FFT of `padded`, then the result before cropping
  std::size_t filled_h = 0, filled_w = 0; ///< corner of `padded` that may be non-zero
};

} // namespace wavestack::propagate
