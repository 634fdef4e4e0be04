#pragma once
// Per-pixel weights in [0, 1] for weighted least-squares unwrapping
// (least_squares.hpp), from a quality map (Ghiglia & Pritt, Two-Dimensional
// Phase Unwrapping, Wiley 1998, ch. 3 "quality maps" [from memory]).
// 1 = fully trusted, 0 = ignored. Both functions write every pixel of
// `weights`, allocate nothing, and throw Error(internal) on a shape mismatch.
#include "wavestack/core/image.hpp"

namespace wavestack::unwrap {

/// Amplitude weights: W = a / max(a) over the frame (the object wave's
/// amplitude is a measure of its signal-to-noise ratio). Negative or
/// non-finite amplitudes give 0; an all-zero frame gives 0 everywhere. Cost:
/// two passes.
void amplitude_weights(ImageView<const float> amplitude, ImageView<float> weights);

/// Phase-derivative-variance weights. For each pixel, over the k×k window
/// around it (k = `window`, odd, >= 3; default 3; clipped at the frame
/// border), with the wrapped differences Δx[y,x] = W(ψ[y,x+1] − ψ[y,x]) and
/// Δy[y,x] = W(ψ[y+1,x] − ψ[y,x]) of the pixels in the window:
///   z = [sqrt(Σ(Δx − mean Δx)²) + sqrt(Σ(Δy − mean Δy)²)] / (pixels in window),
/// (Ghiglia & Pritt's phase derivative variance [from memory]), then
///   W = 1 − z / max(z)      (1 everywhere when max(z) = 0).
/// Noise and residues raise z, smooth fringes of any slope keep it low.
/// Non-finite phase values give W = 0 and are left out of their neighbours'
/// windows. Throws Error(config) for an even window or one < 3. Cost:
/// 2k² wrapped differences per pixel.
void derivative_variance_weights(ImageView<const float> wrapped, ImageView<float> weights, int window = 3);

} // namespace wavestack::unwrap
