// Stage "unwrap": wrapped phase of the field -> continuous phase
// (modules/unwrap), with a residue count per frame and time-lapse continuity.
#include "mask_file.hpp"
#include "stages.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/unwrap/continuity.hpp"
#include "wavestack/unwrap/least_squares.hpp"
#include "wavestack/unwrap/quality.hpp"
#include "wavestack/unwrap/reliability.hpp"
#include "wavestack/unwrap/residues.hpp"

#include <cmath>
#include <limits>
#include <sstream>

namespace wavestack::pipeline::stages {
namespace {

class UnwrapStage final : public Stage {
public:
  explicit UnwrapStage(Params& p) {
    method_ = p.choice("method", {"reliability", "least-squares"}, "reliability");
    const std::string wrap = p.choice("wrap_around", {"none", "x", "y", "both"}, "none");
    ropt_.wrap_x = wrap == "x" || wrap == "both";
    ropt_.wrap_y = wrap == "y" || wrap == "both";
    weights_ = p.choice("weights", {"none", "amplitude", "phase-variance"}, "none");
    if (weights_ != "none" && method_ != "least-squares")
      p.fail("weights", "weights apply to method = \"least-squares\" only");
    lopt_.tolerance = p.number_in("tolerance", 1e-9, 1e-1, lopt_.tolerance);
    lopt_.max_iterations = static_cast<int>(p.number_in("max_iterations", 1, 10000, lopt_.max_iterations));
    lopt_.congruent = p.boolean("congruent").value_or(false);
    max_density_ = p.number_in("residue_warning", 0.0, 1.0, 1e-3);
    continuity_ = p.choice("continuity", {"first-frame", "none"}, "first-frame");
    mask_file_ = MaskFile::from(p); // non-zero = unwrap this pixel
    if (mask_file_.given() && method_ != "reliability")
      p.fail("mask", "a mask applies to method = \"reliability\"; least squares takes weights");
  }
  std::string_view type() const override { return "unwrap"; }
  Kind consumes() const override { return Kind::field; }
  Kind produces() const override { return Kind::phase; }

  Shape plan(const Shape& in, PlanContext& ctx) override {
    h_ = in.height;
    w_ = in.width;
    planes_ = std::max<std::size_t>(in.planes, 1);
    if (mask_file_.given()) mask_ = mask_file_.load(h_, w_, "unwrap");
    if (method_ == "reliability") rel_ = std::make_unique<unwrap::ReliabilityUnwrapper>(h_, w_, ropt_);
    else ls_ = std::make_unique<unwrap::LeastSquaresUnwrapper>(h_, w_, lopt_);
    reference_ = std::numeric_limits<double>::quiet_NaN(); // set by the first (probe) frame
    probing_ = !ctx.dry_run();
    std::ostringstream s;
    s << method_ << (weights_ != "none" ? " weighted by " + weights_ : "")
      << (continuity_ == "first-frame" ? "; background piston held at the first frame's level" : "");
    notes_["unwrap"] = s.str();
    Shape out = in;
    out.kind = Kind::phase;
    return out;
  }

  struct Ws final : StageWorkspace {
    unwrap::ReliabilityUnwrapper::Workspace rel;
    unwrap::LeastSquaresUnwrapper::Workspace ls;
    Image<float> wrapped, weights, amplitude;
  };
  std::unique_ptr<StageWorkspace> make_workspace() const override {
    auto ws = std::make_unique<Ws>();
    if (rel_) ws->rel = rel_->make_workspace();
    if (ls_) ws->ls = ls_->make_workspace();
    ws->wrapped.resize(h_, w_);
    if (weights_ != "none") ws->weights.resize(h_, w_);
    if (weights_ == "amplitude") ws->amplitude.resize(h_, w_);
    return ws;
  }

  void process(FrameState& f, StageWorkspace* wsp) const override {
    auto& ws = *static_cast<Ws*>(wsp);
    f.phase.resize(h_ * planes_, w_); // allocates on a token's first frame only
    std::size_t residue_total = 0;
    for (std::size_t z = 0; z < planes_; ++z) {
      const auto field = f.field.data.view().sub(z * h_, 0, h_, w_);
      for (std::size_t y = 0; y < h_; ++y)
        for (std::size_t x = 0; x < w_; ++x) ws.wrapped(y, x) = std::arg(field(y, x));
      auto out = f.phase.view().sub(z * h_, 0, h_, w_);
      residue_total += unwrap::count_residues(ws.wrapped.view()).total();
      if (rel_ && !mask_.empty()) {
        rel_->apply(ws.wrapped.view(), mask_.view(), out, ws.rel);
      } else if (rel_) {
        rel_->apply(ws.wrapped.view(), out, ws.rel);
      } else if (weights_ == "none") {
        ls_->apply(ws.wrapped.view(), out, ws.ls);
      } else {
        if (weights_ == "amplitude") {
          for (std::size_t y = 0; y < h_; ++y)
            for (std::size_t x = 0; x < w_; ++x) ws.amplitude(y, x) = std::abs(field(y, x));
          unwrap::amplitude_weights(ws.amplitude.view(), ws.weights.view());
        } else {
          unwrap::derivative_variance_weights(ws.wrapped.view(), ws.weights.view());
        }
        ls_->apply(ws.wrapped.view(), ws.weights.view(), out, ws.ls);
      }
      if (continuity_ == "first-frame") hold_piston(out);
    }
    record(f, 0)[0] = static_cast<double>(residue_total);
    const double loops = static_cast<double>((h_ - 1) * (w_ - 1) * planes_);
    if (residue_total / loops > max_density_ && f.source_index >= 0) {
      std::ostringstream s;
      s << "frame " << f.source_index << ": " << residue_total << " phase residues (" << residue_total / loops
        << " per loop, above residue_warning = " << max_density_
        << "); the unwrapped phase may depend on the unwrapping path";
      log::warn(s.str());
    }
  }

  std::vector<RecordSpec> records() const override {
    return {{"quality/residues", 0, "1", {{"description", "phase residues (Goldstein et al. 1988) per frame"}}}};
  }
  Notes notes() const override { return notes_; }

private:
  // The first frame through the stage is the planning probe (the first
  // selected frame): its background piston becomes the reference every
  // frame is brought to by whole cycles, so frames stay parallel.
  void hold_piston(ImageView<float> out) const {
    if (probing_ && std::isnan(reference_)) {
      reference_ = unwrap::background_piston(out);
      return;
    }
    if (std::isnan(reference_)) return; // dry run
    unwrap::keep_continuity(out, reference_);
  }

  std::string method_, weights_, continuity_;
  MaskFile mask_file_;
  Image<std::uint8_t> mask_;
  unwrap::ReliabilityOptions ropt_;
  unwrap::LeastSquaresOptions lopt_;
  double max_density_ = 1e-3;
  std::size_t h_ = 0, w_ = 0, planes_ = 1;
  std::unique_ptr<unwrap::ReliabilityUnwrapper> rel_;
  std::unique_ptr<unwrap::LeastSquaresUnwrapper> ls_;
  mutable double reference_ = std::numeric_limits<double>::quiet_NaN();
  bool probing_ = false;
  Notes notes_;
};

} // namespace

std::unique_ptr<Stage> make_unwrap(Params& p) { return std::make_unique<UnwrapStage>(p); }

} // namespace wavestack::pipeline::stages
