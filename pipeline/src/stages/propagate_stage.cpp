// Stage "propagate": angular spectrum refocus (modules/propagate).
#include "stages.hpp"
#include "wavestack/core/units.hpp"
#include "wavestack/propagate/angular_spectrum.hpp"

#include <cmath>
#include <sstream>

namespace wavestack::pipeline::stages {
namespace {

class PropagateStage final : public Stage {
public:
  explicit PropagateStage(Params& p) {
    if (p.has("distances"))
      p.fail("distances", "planes over a range come with z-stacks in a later version; give one distance");
    auto d = p.length("distance");
    if (!d) {
      if (p.has("distance") ) p.fail("distance", "expected a length such as \"12.5 um\"");
      p.fail("distance", "missing: give the refocus distance, e.g. distance = \"12.5 um\"");
    }
    distance_ = *d;
    const std::string method = p.choice("method", {"angular-spectrum", "auto"}, "angular-spectrum");
    (void)method; // the only method so far; "auto" chooses it
    if (const toml::node* pad = p.node("padding")) {
      if (auto s = pad->as_string()) {
        if (s->get() == "none") opt_.pad_factor = 1.0;
        else if (s->get() != "auto") p.fail("padding", "expected \"auto\", \"none\" or a factor from 1 to 4");
      } else if (pad->is_number()) {
        opt_.pad_factor = p.number_in("padding", 1.0, 4.0, 2.0);
      } else {
        p.fail("padding", "expected \"auto\", \"none\" or a factor from 1 to 4");
      }
    }
  }
  std::string_view type() const override { return "propagate"; }
  Kind consumes() const override { return Kind::field; }
  Kind produces() const override { return Kind::field; }

  Shape plan(const Shape& in, PlanContext&) override {
    as_ = std::make_unique<propagate::AngularSpectrum>(in.height, in.width, in.grid, distance_, opt_);
    Shape out = in;
    out.grid = as_->output_grid();
    std::ostringstream s;
    s << "angular spectrum, " << format_length(distance_) << ", padded to " << as_->padded_height() << "x"
      << as_->padded_width() << ", band limit " << as_->band_limit_fx() * 1e-6 << " x "
      << as_->band_limit_fy() * 1e-6 << " cycles/um";
    notes_["method"] = s.str();
    return out;
  }
  struct Ws final : StageWorkspace {
    propagate::AngularSpectrum::Workspace w;
  };
  std::unique_ptr<StageWorkspace> make_workspace() const override {
    auto ws = std::make_unique<Ws>();
    ws->w = as_->make_workspace();
    return ws;
  }
  void process(FrameState& f, StageWorkspace* ws) const override {
    as_->apply(f.field.data.view(), f.field.data.view(), static_cast<Ws*>(ws)->w);
    f.field.grid = as_->output_grid();
    f.distance += distance_;
  }
  Notes notes() const override { return notes_; }
  std::optional<double> fixed_distance() const override { return distance_; }

private:
  double distance_ = 0;
  propagate::AngularSpectrumOptions opt_;
  std::unique_ptr<propagate::AngularSpectrum> as_;
  Notes notes_;
};

} // namespace

std::unique_ptr<Stage> make_propagate(Params& p) { return std::make_unique<PropagateStage>(p); }

} // namespace wavestack::pipeline::stages
