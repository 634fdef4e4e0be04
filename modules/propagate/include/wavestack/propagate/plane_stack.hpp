#pragma once
// Z-stacks: one field propagated to S planes with one forward FFT and then,
// per plane, one multiply by that plane's transfer function and one inverse
// FFT (the cost of S + 1 FFTs instead of 2S).
//
//   PlaneStack stack(h, w, grid, {-20e-6, ..., 20e-6});   // plan once
//   auto ws = stack.make_workspace();                     // one per thread
//   stack.forward(field, ws);                             // one FFT
//   for (s...) stack.plane(s, out, ws);                   // multiply + IFFT
//
// Parallel over planes: one thread runs forward(in, spectrum, ws0) into a
// caller-owned spectrum (make_spectrum()); then any number of threads call
// plane(s, spectrum, out, ws_t) with their own workspaces (the spectrum is
// only read).
//
// Methods: angular_spectrum or fresnel (transfer functions on one padded
// size, so all planes share the forward spectrum). fresnel_single_fft is
// refused for S > 1 (Error(config)): its output pitch λz/(N·Δx) changes with
// every distance, so the planes would not share a grid. For S == 1 it is
// allowed (forward() does its one FFT, plane(0) the output chirp).
// `auto` with S > 1 is angular_spectrum; if the farthest plane is beyond the
// critical distance (method.hpp), the stack still uses the band-limited
// angular spectrum and warns once with the bandwidth kept; with S == 1 it is
// the single-plane criterion.
// Padding: one padded size for every plane, auto = auto_pad_factor at the
// largest |z|.
// Transfer functions come from the process-wide cache (transfer_function.hpp),
// so stacks, sweeps and stages over the same planes share them. A plane at
// z = 0 is multiplied by H(0), which removes evanescent components, where a
// single-plane propagator copies (equal to 1e-6 for a propagating field).
// Each plane equals the single-plane TransferPropagator at that distance with
// the same padding bit for bit (same plans, tables and products), z = 0 aside.
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/fft/fft.hpp"
#include "wavestack/propagate/method.hpp"
#include "wavestack/propagate/propagator.hpp"
#include "wavestack/propagate/transfer_function.hpp"
#include "wavestack/propagate/workspace.hpp"

#include <cstddef>
#include <cstdint>
#include <memory>
#include <vector>

namespace wavestack::propagate {

class PlaneStack {
public:
  /// Plan an h×w field on `grid` to each of `distances` (m, any order and
  /// sign, at least one). Throws Error(config) for an empty list, non-finite
  /// distances, single-FFT Fresnel with more than one plane, and whatever
  /// choose_method rejects. Warns once (log::warn) when the method is out of
  /// range at some plane, naming the worst plane's numbers. Cost: S transfer
  /// functions (or cache hits) and two FFT plans.
  PlaneStack(std::size_t h, std::size_t w, const Grid& grid, std::vector<double> distances,
             const PropagatorOptions& options = {});

  std::size_t planes() const noexcept { return z_.size(); }
  double distance(std::size_t s) const { return z_.at(s); }
  const std::vector<double>& distances() const noexcept { return z_; }
  Method method() const noexcept { return choice_.method; }
  /// The stack's choice: the reason names the plane that decided it (the
  /// farthest, or the worst out-of-range one), prefixed by the plane range.
  const MethodChoice& choice() const noexcept { return choice_; }
  std::size_t height() const noexcept { return h_; }
  std::size_t width() const noexcept { return w_; }
  std::size_t out_height() const noexcept { return oh_; }
  std::size_t out_width() const noexcept { return ow_; }
  std::size_t padded_height() const noexcept { return ph_; }
  std::size_t padded_width() const noexcept { return pw_; }
  /// Grid of plane s (plane = input plane + distance(s)).
  Grid output_grid(std::size_t s) const;
  /// Shared transfer function of plane s (nullptr for single-FFT).
  const std::shared_ptr<const TransferFunction>& transfer_function(std::size_t s) const { return tf_.at(s); }

  /// Scratch for one thread: the padded input and spectrum (as for
  /// single-plane propagators) and the ph×pw product spectrum·H, inverted in
  /// place; three ph×pw buffers (35 MB at 1200²). Only the transfer
  /// function's support is multiplied, the rest of the product is zero-filled
  /// (TransferFunction::multiply_support), which skips most of the memory
  /// traffic when most bins are evanescent (microscope grids).
  struct Workspace {
    propagate::Workspace base;
    Image<cfloat> scratch;               ///< spectrum·H, inverse FFT in place
    std::vector<std::uint32_t> written;  ///< per-row bookkeeping for multiply_support
  };
  Workspace make_workspace() const;
  /// A ph×pw spectrum buffer for the shared-spectrum calls.
  Image<cfloat> make_spectrum() const { return Image<cfloat>(ph_, pw_); }

  /// Zero-pad `in` (h×w) and FFT it into ws.base.spectrum.
  void forward(ImageView<const cfloat> in, Workspace& ws) const;
  /// Plane s of the spectrum left by forward(in, ws) into `out`
  /// (out_height × out_width; any stride). Allocation-free.
  void plane(std::size_t s, ImageView<cfloat> out, Workspace& ws) const;
  /// The same with a caller-owned spectrum (resized to ph×pw, no allocation
  /// once it has the capacity), so threads can share it read-only.
  void forward(ImageView<const cfloat> in, Image<cfloat>& spectrum, Workspace& ws) const;
  void plane(std::size_t s, const Image<cfloat>& spectrum, ImageView<cfloat> out, Workspace& ws) const;

private:
  void check_workspace(const Workspace& ws) const;
  void run_plane(std::size_t s, const cfloat* spectrum, ImageView<cfloat> out, Workspace& ws) const;

  std::size_t h_, w_, oh_, ow_, ph_, pw_;
  Grid grid_;
  std::vector<double> z_;
  MethodChoice choice_;
  std::vector<std::shared_ptr<const TransferFunction>> tf_;
  std::unique_ptr<FresnelSingleFFT> single_; ///< S == 1 single-FFT only
  std::shared_ptr<const fft::PaddedC2C> fwd_; ///< forward of the zero-padded field (out of place)
  std::shared_ptr<const fft::C2C> inv_;       ///< backward, in place
};

} // namespace wavestack::propagate
