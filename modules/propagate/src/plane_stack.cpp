#include "wavestack/propagate/plane_stack.hpp"

#include "detail.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <tuple>

namespace wavestack::propagate {

using detail::length;
using detail::shape;

PlaneStack::PlaneStack(std::size_t h, std::size_t w, const Grid& grid, std::vector<double> distances,
                       const PropagatorOptions& options)
    : h_(h), w_(w), oh_(h), ow_(w), ph_(0), pw_(0), grid_(grid), z_(std::move(distances)) {
  if (z_.empty()) fail_config("plane stack: no distances given");
  for (double z : z_)
    if (!std::isfinite(z)) fail_config("plane stack: every distance must be a finite length");
  detail::check_setup("plane stack", h, w, grid, z_.front());
  const auto [lo, hi] = std::minmax_element(z_.begin(), z_.end());
  const double zmax = std::max(std::fabs(*lo), std::fabs(*hi));
  const std::size_t S = z_.size();
  const std::string range = "plane stack of " + std::to_string(S) + (S == 1 ? " plane" : " planes") +
                            (S == 1 ? "" : " from " + length(*lo) + " to " + length(*hi));

  if (S == 1) {
    choice_ = choose_method(h, w, grid, z_[0], options);
  } else {
    if (options.method == Method::fresnel_single_fft)
      fail_config(range + ": single-FFT Fresnel cannot serve a stack, because its output pitch λz/(N·Δx) changes "
                          "with every distance and the planes would not share a grid; use angular-spectrum or "
                          "fresnel, or one plane per stack");
    PropagatorOptions o = options;
    const Method m = options.method.value_or(Method::angular_spectrum);
    o.method = m;
    // One padded size for all planes: resolve padding at the farthest plane.
    o.padding = Padding::of(detail::resolve_padding(m, h, w, grid, zmax, options));
    // The deciding plane: an out-of-range one with the largest paraxial
    // error (then the farthest), else the farthest.
    std::size_t worst = 0;
    MethodChoice best;
    for (std::size_t s = 0; s < S; ++s) {
      MethodChoice c = choose_method(h, w, grid, z_[s], o);
      auto rank = [](const MethodChoice& x, double z) {
        return std::make_tuple(x.explicit_out_of_range, x.paraxial_error, std::fabs(z));
      };
      if (s == 0 || rank(c, z_[s]) > rank(best, z_[worst])) {
        best = std::move(c);
        worst = s;
      }
    }
    if (!options.method) {
      // An auto stack out of range is a fallback, not an explicit request.
      best.auto_out_of_range = best.explicit_out_of_range;
      best.explicit_out_of_range = false;
      const std::string prefix = "angular spectrum (requested";
      if (best.reason.compare(0, prefix.size(), prefix) == 0)
        best.reason = "angular spectrum (auto; single-FFT Fresnel cannot serve a stack)" +
                      best.reason.substr(best.reason.find(')') + 1);
    }
    choice_ = std::move(best);
    choice_.reason = range + ", deciding plane z = " + length(z_[worst]) + ": " + choice_.reason;
  }
  detail::warn_if_out_of_range(choice_, h, w, grid, "plane stack");

  ph_ = detail::padded_size(h, choice_.pad_factor);
  pw_ = detail::padded_size(w, choice_.pad_factor);
  tf_.resize(S);
  if (choice_.method == Method::fresnel_single_fft) {
    single_ = std::make_unique<FresnelSingleFFT>(h, w, grid, z_[0], choice_);
    oh_ = single_->out_height();
    ow_ = single_->out_width();
    return;
  }
  const TransferKind kind =
      choice_.method == Method::fresnel ? TransferKind::fresnel : TransferKind::angular_spectrum;
  for (std::size_t s = 0; s < S; ++s) tf_[s] = cached_transfer(kind, ph_, pw_, grid, z_[s], options.band_limit);
  fwd_ = fft::plan_padded_c2c(ph_, pw_, h_, fft::Direction::forward);
  inv_ = fft::plan_c2c(ph_, pw_, fft::Direction::backward, true);
}

Grid PlaneStack::output_grid(std::size_t s) const {
  if (single_) return single_->output_grid();
  Grid g = grid_;
  g.plane = grid_.plane + z_.at(s);
  return g;
}

PlaneStack::Workspace PlaneStack::make_workspace() const {
  Workspace ws;
  ws.base.padded = Image<cfloat>(ph_, pw_, cfloat(0.0f, 0.0f));
  ws.base.spectrum = Image<cfloat>(ph_, pw_);
  if (!single_) {
    ws.scratch = Image<cfloat>(ph_, pw_, cfloat(0.0f, 0.0f));
    ws.written.assign(ph_, 0);
  }
  return ws;
}

void PlaneStack::check_workspace(const Workspace& ws) const {
  const bool ok = ws.base.padded.height() == ph_ && ws.base.padded.width() == pw_ &&
                  ws.base.spectrum.height() == ph_ && ws.base.spectrum.width() == pw_ &&
                  (single_ || (ws.scratch.height() == ph_ && ws.scratch.width() == pw_ &&
                               ws.written.size() == ph_));
  if (!ok)
    fail_internal("plane stack: the workspace was made for another padded size (need " + shape(ph_, pw_) +
                  "); use make_workspace()");
}

void PlaneStack::forward(ImageView<const cfloat> in, Image<cfloat>& spectrum, Workspace& ws) const {
  if (in.height() != h_ || in.width() != w_)
    fail_internal("plane stack: the input field is " + shape(in.height(), in.width()) + ", planned for " +
                  shape(h_, w_));
  check_workspace(ws);
  if (&spectrum == &ws.base.padded || &spectrum == &ws.scratch)
    fail_internal("plane stack: the spectrum cannot be one of the workspace's scratch buffers");
  spectrum.resize(ph_, pw_); // no allocation when it already has the capacity
  if (single_) {
    single_->transform(in, spectrum.data(), ws.base);
    return;
  }
  detail::fill_corner(in, ws.base);
  fwd_->execute(ws.base.padded.data(), spectrum.data());
}

void PlaneStack::forward(ImageView<const cfloat> in, Workspace& ws) const { forward(in, ws.base.spectrum, ws); }

void PlaneStack::run_plane(std::size_t s, const cfloat* spectrum, ImageView<cfloat> out, Workspace& ws) const {
  if (s >= z_.size())
    fail_internal("plane stack: plane " + std::to_string(s) + " of " + std::to_string(z_.size()) + " requested");
  if (out.height() != oh_ || out.width() != ow_)
    fail_internal("plane stack: the output field is " + shape(out.height(), out.width()) + ", the stack produces " +
                  shape(oh_, ow_));
  check_workspace(ws);
  if (single_) {
    single_->finish(spectrum, out);
    return;
  }
  // The in-place inverse FFT below leaves garbage everywhere in scratch, so
  // every row is marked fully written: multiply_support then zero-fills
  // outside the support (a memset) and reads the spectrum only inside it.
  // (Measured: cheaper than an out-of-place inverse that would keep the
  // zeros, whose FFTW plan runs ~10% slower than the in-place one here.)
  std::fill(ws.written.begin(), ws.written.end(), static_cast<std::uint32_t>(pw_ / 2 + 1));
  tf_[s]->multiply_support(spectrum, ws.scratch.data(), ws.written.data());
  inv_->execute(ws.scratch.data(), ws.scratch.data());
  for (std::size_t y = 0; y < h_; ++y)
    std::memcpy(static_cast<void*>(out.row(y)), ws.scratch.row(y), w_ * sizeof(cfloat));
}

void PlaneStack::plane(std::size_t s, ImageView<cfloat> out, Workspace& ws) const {
  run_plane(s, ws.base.spectrum.data(), out, ws);
}

void PlaneStack::plane(std::size_t s, const Image<cfloat>& spectrum, ImageView<cfloat> out, Workspace& ws) const {
  if (spectrum.height() != ph_ || spectrum.width() != pw_)
    fail_internal("plane stack: the spectrum is " + shape(spectrum.height(), spectrum.width()) + ", need " +
                  shape(ph_, pw_));
  run_plane(s, spectrum.data(), out, ws);
}

} // namespace wavestack::propagate
