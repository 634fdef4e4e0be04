// Stage "fringe": hologram conditioning (modules/fringe).
#include "stages.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/fringe/conditioner.hpp"

#include <cmath>

namespace wavestack::pipeline::stages {
namespace {

class FringeStage final : public Stage {
public:
  explicit FringeStage(Params& p) {
    const std::string dc = p.choice("dc", {"mean", "local", "none"}, "mean");
    opt_.dc = dc == "mean" ? fringe::DcMode::mean : dc == "local" ? fringe::DcMode::local : fringe::DcMode::none;
    opt_.tukey = p.choice("apodize", {"none", "tukey"}, "none") == "tukey";
    opt_.tukey_alpha = p.number_in("tukey_fraction", 0.0, 1.0, 0.1);
    if (auto k = p.integer("local_window")) {
      if (*k < 1 || *k % 2 == 0) p.fail("local_window", "expected an odd number of pixels >= 1");
      opt_.local_window = static_cast<int>(*k);
    }
    normalise_ = p.choice("background", {"divide", "ignore"}, "divide") == "divide";
  }
  std::string_view type() const override { return "fringe"; }
  Kind consumes() const override { return Kind::hologram; }
  Kind produces() const override { return Kind::hologram; }

  Shape plan(const Shape& in, PlanContext& ctx) override {
    const Image<float>* bg = normalise_ && !ctx.dry_run() ? ctx.background() : nullptr;
    if (bg) {
      // Divide by the background's illumination envelope, not by its fringes:
      // a local mean over many fringe periods keeps only the envelope.
      fringe::ConditionerOptions env_opt;
      env_opt.dc = fringe::DcMode::local;
      fringe::Conditioner smoother(in.height, in.width, env_opt);
      Image<float> detail = *bg;
      auto ws = smoother.make_workspace();
      smoother.apply(detail.view(), ws);
      envelope_.resize(in.height, in.width);
      for (std::size_t i = 0; i < envelope_.size(); ++i) envelope_.data()[i] = bg->data()[i] - detail.data()[i];
      notes_["background"] = "divided by the background envelope (box " + std::to_string(smoother.local_window()) +
                             " px)";
    }
    cond_ = std::make_unique<fringe::Conditioner>(in.height, in.width, opt_, bg ? &envelope_ : nullptr);
    if (opt_.dc == fringe::DcMode::local) notes_["local_window"] = std::to_string(cond_->local_window()) + " px";
    return in;
  }

  struct Ws final : StageWorkspace {
    fringe::Conditioner::Workspace w;
  };
  std::unique_ptr<StageWorkspace> make_workspace() const override {
    auto ws = std::make_unique<Ws>();
    ws->w = cond_->make_workspace();
    return ws;
  }
  void process(FrameState& f, StageWorkspace* ws) const override {
    cond_->apply(f.hologram.view(), static_cast<Ws*>(ws)->w);
  }
  Notes notes() const override { return notes_; }

private:
  fringe::ConditionerOptions opt_;
  bool normalise_ = true;
  Image<float> envelope_;
  std::unique_ptr<fringe::Conditioner> cond_;
  Notes notes_;
};

} // namespace

std::unique_ptr<Stage> make_fringe(Params& p) { return std::make_unique<FringeStage>(p); }

} // namespace wavestack::pipeline::stages
