#pragma once
// Least-squares phase unwrapping (Ghiglia & Romero, J. Opt. Soc. Am. A
// 11(1), 107–117 (1994); Ghiglia & Pritt, Two-Dimensional Phase Unwrapping,
// Wiley 1998, ch. 5). See REFERENCES.md "Least squares by DCT".
//
// Unweighted: minimise Σ (φ[y,x+1] − φ[y,x] − gx[y,x])² + Σ (φ[y+1,x] −
// φ[y,x] − gy[y,x])² over the edges inside the frame, where g are the
// wrapped differences gx[y,x] = W(ψ[y,x+1] − ψ[y,x]) (x < w−1) and gy[y,x] =
// W(ψ[y+1,x] − ψ[y,x]) (y < h−1). The normal equations are the discrete
// Poisson equation with Neumann boundary
//   (φ[y,x+1] − 2φ[y,x] + φ[y,x−1]) + (φ[y+1,x] − 2φ[y,x] + φ[y−1,x]) = ρ[y,x],
//   ρ[y,x] = gx[y,x] − gx[y,x−1] + gy[y,x] − gy[y−1,x]   (g = 0 outside),
// solved exactly by a 2-D DCT-II (FFTW REDFT10), division by the eigenvalues
// 2cos(πi/h) + 2cos(πj/w) − 4 (the (0,0) term, the free constant, set to
// 0) and a DCT-III (REDFT01), normalised by 1/(4hw).
//
// Weighted: minimise Σ U (φ diff − g)² with edge weights U[y,x] =
// min(W[y,x]², W[y,x+1]²) (and likewise along y) from a per-pixel weight
// image W ∈ [0, 1] (Ghiglia & Romero's choice [from memory]). The normal
// equations Qφ = ρ_U are solved by preconditioned conjugate gradients with
// the unweighted DCT solver as preconditioner, starting from φ = 0;
// stopping when ‖ρ_U − Qφ‖ ≤ tolerance·‖ρ_U‖ or after max_iterations.
// Pixels whose edges all have weight 0 are not constrained by the data:
// they receive the smooth fill-in that the preconditioner produces.
//
// The result is a smooth estimate with zero mean over the frame. It is NOT
// congruent to the input: where the wrapped differences contain residues
// (and with noise) φ mod 2π differs from the measured phase, and unweighted
// least squares underestimates slopes around residues (Ghiglia & Romero).
// With `congruent = true` the congruence step
//   out = ψ + 2π·round((φ − ψ)/2π)
// (wrap.hpp, make_congruent) is applied at the end: the output then equals
// the measurement modulo 2π and the least-squares solution to within ±π.
//
// Cost (measured on the development machine, FFTW 3.3.10, estimate plans):
// 512² direct solve ≈ 9 ms, one PCG iteration ≈ 8 ms (41 iterations to
// 1e-5 on a noisy frame with derivative-variance weights); 1024² direct ≈
// 90 ms, PCG ≈ 70 ms per iteration. FFTW's estimate plans for these cosine
// transforms are slow: with fft::set_planning(Planning::measure) (or loaded
// wisdom) the 1024² DCT-II + DCT-III pair drops from ~41 ms to ~15 ms, at
// the price of ~1 s of planning and plans that are no longer a pure
// function of the sizes. Tolerance against result (512², same frame): 1e-4
// → 22 iterations, RMS change 2e-3 rad; 1e-5 → 41, 2e-5 rad; 1e-6 → 49.
//
// FFT plans: the fft module only has complex plans, so this module makes its
// own real-to-real plans (in-place, on fftwf_malloc scratch, planner effort
// = fft::planning()), kept for the life of the process in a cache guarded by
// this module's own mutex. Planning against the fft module's planner is made
// safe by FFTW's own global planner lock, which the fft module switches on
// with fftwf_make_planner_thread_safe() when its plan cache is created; the
// constructor below forces that creation (via fft::planning()) before it
// plans. Execution is fftwf_execute_r2r on workspace buffers (thread-safe).
#include "wavestack/core/image.hpp"

#include <cstddef>

struct fftwf_plan_s; // FFTW's opaque plan type (fftwf_plan is fftwf_plan_s*)

namespace wavestack::unwrap {

struct LeastSquaresOptions {
  /// Weighted solve: stop when the residual norm ‖ρ_U − Qφ‖₂ is at most
  /// tolerance × ‖ρ_U‖₂. Accepted (0, 1); default 1e-5. Below ~1e-6 float
  /// round-off may keep the iteration from getting there (max_iterations
  /// then ends it; stats say converged = false).
  double tolerance = 1e-5;
  /// Weighted solve: at most this many PCG iterations (each costs one DCT
  /// solve, i.e. two h×w real transforms, plus one pass of the weighted
  /// Laplacian). Accepted >= 1; default 200.
  int max_iterations = 200;
  /// Apply the congruence step at the end (see above). Default false.
  bool congruent = false;
};

/// What one solve did.
struct LeastSquaresStats {
  int iterations = 0;           ///< PCG iterations; 0 for the direct (unweighted) solve
  double relative_residual = 0; ///< ‖ρ_U − Qφ‖/‖ρ_U‖ at the end (weighted); 0 for the direct solve
  bool converged = true;        ///< false when max_iterations ended the PCG before tolerance
};

class LeastSquaresUnwrapper {
public:
  /// Plan for h×w frames (h, w >= 1). Throws Error(config) for a zero size,
  /// a tolerance outside (0, 1) or max_iterations < 1. Cost: two FFTW r2r
  /// plans (cached per size) and an h×w table of inverse eigenvalues.
  LeastSquaresUnwrapper(std::size_t h, std::size_t w, LeastSquaresOptions options = {});

  std::size_t height() const noexcept { return h_; }
  std::size_t width() const noexcept { return w_; }
  const LeastSquaresOptions& options() const noexcept { return opt_; }

  /// Scratch for one thread (7 h×w float images, 28 bytes per pixel);
  /// apply() and integrate() never allocate.
  struct Workspace {
    Image<float> gx, gy; ///< differences along x and y (PCG: then φ and Q·p)
    Image<float> ux, uy; ///< edge weights (weighted solve)
    Image<float> rhs;    ///< ρ, then the PCG residual
    Image<float> z, p;   ///< DCT buffer / preconditioned residual, search direction
  };
  Workspace make_workspace() const;

  /// Unweighted least squares of the wrapped phase `wrapped` (h×w, any real
  /// values; non-finite pixels contribute zero differences) into `out`
  /// (h×w, may alias `wrapped`). Direct DCT solve.
  LeastSquaresStats apply(ImageView<const float> wrapped, ImageView<float> out, Workspace& ws) const;

  /// Weighted least squares with per-pixel weights `weights` (h×w, values
  /// clamped to [0, 1], non-finite = 0; see quality.hpp for ways to make
  /// them). PCG as described above.
  LeastSquaresStats apply(ImageView<const float> wrapped, ImageView<const float> weights, ImageView<float> out,
                          Workspace& ws) const;

  /// Least-squares integration of given differences (no wrapping): gx[y,x]
  /// ≈ φ[y,x+1] − φ[y,x] (column w−1 ignored), gy[y,x] ≈ φ[y+1,x] − φ[y,x]
  /// (row h−1 ignored), all h×w. Unweighted: direct solve; `congruent` is
  /// not applied (there is no wrapped phase). Result has zero mean.
  LeastSquaresStats integrate(ImageView<const float> gy, ImageView<const float> gx, ImageView<float> out,
                              Workspace& ws) const;
  /// Weighted integration (PCG), weights as in apply().
  LeastSquaresStats integrate(ImageView<const float> gy, ImageView<const float> gx,
                              ImageView<const float> weights, ImageView<float> out, Workspace& ws) const;

  /// The Neumann-Poisson solve alone: out = L⁻¹ rhs with the mean of rhs
  /// removed (zero-mean solution). `rhs` and `out` h×w; `out` may alias
  /// `rhs`. Uses ws.z as the transform buffer.
  void solve_poisson(ImageView<const float> rhs, ImageView<float> out, Workspace& ws) const;

private:
  void check(std::size_t h, std::size_t w, const char* what) const;
  void check_workspace(const Workspace& ws) const;
  void edge_weights(ImageView<const float> weights, ImageView<const float> wrapped, Workspace& ws) const;
  const Image<float>& direct(Workspace& ws) const;
  const Image<float>& pcg(Workspace& ws, LeastSquaresStats& st) const;
  void dct_solve(float* buf) const; ///< in place on a contiguous, aligned h×w buffer

  std::size_t h_, w_;
  LeastSquaresOptions opt_;
  Image<float> inv_eig_; ///< 1/((2cos(πi/h) + 2cos(πj/w) − 4)·4hw), 0 at (0,0)
  fftwf_plan_s* forward_ = nullptr; ///< in-place REDFT10 ⊗ REDFT10, cached for the process
  fftwf_plan_s* inverse_ = nullptr; ///< in-place REDFT01 ⊗ REDFT01
};

} // namespace wavestack::unwrap
