#pragma once
// One interface for every single-plane propagation method, so a pipeline
// stage can hold any of them:
//
//   auto p = make_propagator(h, w, grid, distance, {.method = std::nullopt});
//   auto ws = p->make_workspace();            // one per thread
//   p->apply(in, out, ws);                    // out is out_height × out_width
//   grid_out = p->output_grid();              // pitch changes for single-FFT
//   log or record p->choice().reason;
//
// Methods and the criterion are in method.hpp. Conventions shared by all:
// exp(+ikz) for a wave travelling towards +z (REFERENCES.md Conventions), a
// positive distance propagates forward, λ = λ0/n, and apply() is const,
// allocation-free (FFTW may malloc small scratch inside its algorithms, see
// fft.hpp) and thread-safe with one Workspace per thread. Workspaces are the
// common propagate::Workspace (workspace.hpp).
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/fft/fft.hpp"
#include "wavestack/propagate/method.hpp"
#include "wavestack/propagate/transfer_function.hpp"
#include "wavestack/propagate/workspace.hpp"

#include <cstddef>
#include <memory>
#include <vector>

namespace wavestack::propagate {

class Propagator {
public:
  virtual ~Propagator() = default;
  Method method() const noexcept { return choice_.method; }
  /// How the method was chosen, with the numbers (see method.hpp).
  const MethodChoice& choice() const noexcept { return choice_; }
  std::size_t height() const noexcept { return h_; } ///< input rows
  std::size_t width() const noexcept { return w_; }  ///< input columns
  std::size_t out_height() const noexcept { return oh_; }
  std::size_t out_width() const noexcept { return ow_; }
  std::size_t padded_height() const noexcept { return ph_; }
  std::size_t padded_width() const noexcept { return pw_; }
  double distance() const noexcept { return z_; }
  /// Grid of the output: plane += distance; pitch as the method gives it.
  const Grid& output_grid() const noexcept { return out_grid_; }

  /// Scratch for one thread (two ph×pw complex buffers).
  Workspace make_workspace() const;
  /// Propagate `in` (height × width) into `out` (out_height × out_width).
  /// Views may be strided; `in` and `out` may be the same array when the
  /// sizes are equal. Throws Error(internal) on a shape or workspace
  /// mismatch.
  virtual void apply(ImageView<const cfloat> in, ImageView<cfloat> out, Workspace& ws) const = 0;

protected:
  Propagator() = default;
  void check_in(ImageView<const cfloat> v) const;
  void check_out(ImageView<const cfloat> v) const;
  void check_workspace(const Workspace& ws) const;

  std::size_t h_ = 0, w_ = 0, oh_ = 0, ow_ = 0, ph_ = 0, pw_ = 0;
  double z_ = 0;
  Grid out_grid_;
  MethodChoice choice_;
};

/// Angular spectrum or Fresnel transfer function: zero-pad to ph×pw (the
/// field in the top-left corner), FFT, multiply by H from the shared cache
/// (transfer_function.hpp), inverse FFT, crop the top-left h×w. Output grid
/// = input grid with plane += distance. With angular_spectrum the result is
/// bit-identical to AngularSpectrum with the same pad factor. Distance 0
/// copies. Cost per apply: two ph×pw FFTs and one multiply.
class TransferPropagator final : public Propagator {
public:
  /// `choice.method` must be angular_spectrum or fresnel; `choice.pad_factor`
  /// gives the padding. make_propagator() is the usual way in.
  TransferPropagator(std::size_t h, std::size_t w, const Grid& grid, double distance, const MethodChoice& choice,
                     bool band_limit = true);
  void apply(ImageView<const cfloat> in, ImageView<cfloat> out, Workspace& ws) const override;
  /// The shared transfer function (nullptr at distance 0).
  const std::shared_ptr<const TransferFunction>& transfer_function() const noexcept { return tf_; }

private:
  std::shared_ptr<const TransferFunction> tf_;
  std::shared_ptr<const fft::PaddedC2C> fwd_; ///< forward of the zero-padded field
  std::shared_ptr<const fft::C2C> inv_;
};

/// Single-FFT ("direct") Fresnel:
///   U2(x2, y2) = e^{ikz}/(iλz) e^{iπ(x2²+y2²)/(λz)}
///                · DFT{U1(x1, y1) e^{iπ(x1²+y1²)/(λz)}} · Δx1 Δy1
/// (Goodman 2005 ch. 4; REFERENCES.md Propagation [from memory]).
/// Geometry: the optical axis passes through input pixel (h/2, w/2) and
/// output pixel (ph/2, pw/2) (integer division: the fftshift centre), so
/// x1 = (j − w/2)Δx1 and x2 = (m − pw/2)Δx2. The input is zero-padded to
/// ph×pw = padded_length(h|w, pad_factor) and the output is the whole
/// transformed array: out_height × out_width = ph × pw (equal to the input
/// size for padding none and 7-smooth sizes), pitch Δx2 = λ|z|/(pw·Δx1),
/// Δy2 = λ|z|/(ph·Δy1), window λ|z|/Δx1 whatever the padding (padding only
/// interpolates the output more finely).
/// Negative z: the kernel is then the adjoint (conjugate) one, which for this
/// unitary propagator is the inverse, and the formula holds with signed z;
/// but λz/(NΔx) would be a negative pitch, i.e. a mirrored axis. The DFT's
/// exponent is therefore taken as e^{−i2π x1x2/(λz)} literally: for z < 0
/// that is the backward (inverse) DFT, the output pitch stays positive,
/// λ|z|/(NΔx1), and the axes keep their orientation (no mirror image). A
/// forward step of z followed by −z on its output grid (padding none)
/// returns the input exactly, zero-padded to ph×pw with its pixel (h/2, w/2)
/// at (ph/2, pw/2) (discrete unitarity [derived]).
/// The sampled output values are exact samples of the Fresnel integral of
/// the sampled input when the input chirp is sampled (Δx1 <= λ|z|/L). The
/// output's own curvature e^{iπx2²/(λz)} has local frequency 1/(2Δx1) at the
/// window edge, above the output Nyquist frequency 1/(2Δx2) = P·Δx1/(2λ|z|)
/// unless P·Δx1² >= λ|z| (per axis) [derived]: harmless for intensity and
/// phase maps, but a further FFT-based propagation of this output must
/// account for it. Distance 0 is rejected (Error(config)).
/// Cost per apply: one ph×pw FFT and two chirp multiplies.
class FresnelSingleFFT final : public Propagator {
public:
  FresnelSingleFFT(std::size_t h, std::size_t w, const Grid& grid, double distance, const MethodChoice& choice);
  void apply(ImageView<const cfloat> in, ImageView<cfloat> out, Workspace& ws) const override;

  /// Pieces for PlaneStack and spectrum reuse: chirp + pad + DFT into
  /// `spectrum` (ph×pw), then the output chirp and centring into `out`.
  void transform(ImageView<const cfloat> in, cfloat* spectrum, Workspace& ws) const;
  void finish(const cfloat* spectrum, ImageView<cfloat> out) const;

private:
  std::vector<cfloat> in_x_, in_y_;   ///< e^{iπx1²/(λz)} per column / row
  std::vector<cfloat> out_x_, out_y_; ///< output chirp × centring phase (× constant in out_y_)
  std::shared_ptr<const fft::C2C> dft_;
};

/// Choose (choose_method), warn once when the choice is out of range
/// (log::warn, see method.hpp), and build the propagator. Throws
/// Error(config) for bad settings.
std::unique_ptr<Propagator> make_propagator(std::size_t h, std::size_t w, const Grid& grid, double distance,
                                            const PropagatorOptions& options = {});

} // namespace wavestack::propagate
