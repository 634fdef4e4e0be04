// Stage "propagate": refocus the field (modules/propagate) to one plane, to
// a stack of planes, or to the plane an autofocus stage found per frame.
#include "stages.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/core/units.hpp"
#include "wavestack/propagate/method.hpp"
#include "wavestack/propagate/plane_stack.hpp"
#include "wavestack/propagate/propagator.hpp"

#include <cmath>
#include <limits>
#include <sstream>

namespace wavestack::pipeline::stages {
namespace {

/// Planes of `distances = { from, to, step }`: from, from+step, ... up to
/// `to` inclusive (within a millionth of a step).
std::vector<double> range_planes(Params& p, Params& r) {
  auto from = r.length("from"), to = r.length("to"), step = r.length("step");
  if (!from || !to || !step) r.fail("from", "a range needs from, to and step, e.g. { from = \"-20 um\", to = \"20 um\", step = \"1 um\" }");
  r.finish();
  if (!(*step > 0)) r.fail("step", "must be a positive length");
  const double n = std::floor((*to - *from) / *step + 1e-6);
  if (n < 0) r.fail("to", "must not be below from");
  if (n > 10000) p.fail("distances", "more than 10000 planes; use a larger step");
  std::vector<double> z;
  for (long i = 0; i <= static_cast<long>(n); ++i) z.push_back(*from + static_cast<double>(i) * *step);
  return z;
}

class PropagateStage final : public Stage {
public:
  explicit PropagateStage(Params& p) {
    if (p.has("distance") && p.has("distances"))
      p.fail("distances", "give either distance (one plane) or distances (a stack), not both");
    if (const toml::node* n = p.node("distances")) {
      if (n->is_table()) {
        Params r = *p.table("distances");
        planes_ = range_planes(p, r);
      } else if (n->is_array()) {
        auto list = p.strings("distances");
        for (const std::string& s : *list) {
          std::string why;
          auto v = try_parse_length(s, &why);
          if (!v) p.fail("distances", why);
          planes_.push_back(*v);
        }
        if (planes_.empty()) p.fail("distances", "the list is empty");
      } else {
        p.fail("distances", "expected a list such as [\"-5 um\", \"0 um\", \"5 um\"] or a range such as "
                            "{ from = \"-20 um\", to = \"20 um\", step = \"1 um\" }");
      }
    } else if (const toml::node* d0 = p.node("distance");
               d0 && d0->as_string() && d0->as_string()->get() == "focus") {
      at_focus_ = true;
    } else {
      auto d = p.length("distance");
      if (!d) p.fail("distance", "missing: give the refocus distance, e.g. distance = \"12.5 um\", "
                                 "\"focus\" after an autofocus stage, or distances = {...} for a stack");
      planes_ = {*d};
    }
    const std::string method = p.choice("method", {"auto", "angular-spectrum", "fresnel", "fresnel-single-fft"}, "auto");
    propagate::parse_method(method, &opt_.method);
    if (const toml::node* pad = p.node("padding")) {
      if (auto s = pad->as_string()) {
        if (s->get() == "none") opt_.padding = propagate::Padding::none();
        else if (s->get() != "auto") p.fail("padding", "expected \"auto\", \"none\" or a factor from 1 to 4");
      } else if (pad->is_number()) {
        opt_.padding = propagate::Padding::of(p.number_in("padding", 1.0, 4.0, 2.0));
      } else {
        p.fail("padding", "expected \"auto\", \"none\" or a factor from 1 to 4");
      }
    }
  }
  std::string_view type() const override { return "propagate"; }
  Kind consumes() const override { return Kind::field; }
  Kind produces() const override { return Kind::field; }

  Shape plan(const Shape& in, PlanContext& ctx) override {
    if (in.planes) fail_config("the field is already a stack of planes; propagate it before making a stack");
    const Instrument& ins = ctx.instrument();
    if (ins.numerical_aperture > 0) opt_.max_frequency = ins.numerical_aperture / ins.wavelength;
    in_ = in;
    Shape out = in;
    if (at_focus_) {
      if (!in.focus_available)
        fail_config("distance = \"focus\" needs an autofocus stage before this stage");
      out.plane_varies = true;
      notes_["planes"] = "the focus found for each frame";
      return out;
    }
    if (planes_.size() == 1) {
      single_ = propagate::make_propagator(in.height, in.width, in.grid, planes_[0], opt_);
      out.height = single_->out_height();
      out.width = single_->out_width();
      out.grid = single_->output_grid();
      notes_["method"] = single_->choice().reason;
      return out;
    }
    stack_ = std::make_unique<propagate::PlaneStack>(in.height, in.width, in.grid, planes_, opt_);
    out.height = stack_->out_height();
    out.width = stack_->out_width();
    out.planes = stack_->planes();
    out.grid = stack_->output_grid(0);
    std::ostringstream s;
    s << stack_->planes() << " planes from " << format_length(planes_.front()) << " to "
      << format_length(planes_.back()) << "; " << stack_->choice().reason;
    notes_["method"] = s.str();
    return out;
  }

  struct Ws final : StageWorkspace {
    propagate::Workspace single;
    propagate::PlaneStack::Workspace stack;
    Image<cfloat> out; ///< single-FFT Fresnel output when its size differs
  };
  std::unique_ptr<StageWorkspace> make_workspace() const override {
    auto ws = std::make_unique<Ws>();
    if (single_) ws->single = single_->make_workspace();
    if (stack_) ws->stack = stack_->make_workspace();
    return ws;
  }
  void process(FrameState& f, StageWorkspace* wsp) const override {
    auto& ws = *static_cast<Ws*>(wsp);
    if (at_focus_) return to_focus(f, ws);
    if (single_) {
      if (single_->out_height() == in_.height && single_->out_width() == in_.width) {
        single_->apply(f.field.data.view(), f.field.data.view(), ws.single);
      } else {
        // single-FFT Fresnel with padding changes the size: write into the
        // workspace's buffer and swap it with the frame's (same capacity
        // once every buffer has served one frame: no allocation after that).
        ws.out.resize(single_->out_height(), single_->out_width());
        single_->apply(f.field.data.view(), ws.out.view(), ws.single);
        f.field.data.swap(ws.out);
      }
      f.field.grid = single_->output_grid();
      f.distance += planes_[0];
      return;
    }
    stack_->forward(f.field.data.view(), ws.stack);
    const std::size_t h = stack_->out_height(), w = stack_->out_width();
    f.field.data.resize(h * stack_->planes(), w); // allocates on a token's first frame only
    for (std::size_t s = 0; s < stack_->planes(); ++s)
      stack_->plane(s, f.field.data.view().sub(s * h, 0, h, w), ws.stack);
    f.field.grid = stack_->output_grid(0);
    f.planes = stack_->planes();
    f.distance = std::numeric_limits<double>::quiet_NaN();
  }
  Notes notes() const override { return notes_; }
  std::optional<double> fixed_distance() const override {
    if (planes_.size() == 1 && !at_focus_) return planes_[0];
    return std::nullopt;
  }
  std::vector<ConstantSpec> constants() const override {
    if (!stack_) return {};
    std::vector<double> z;
    for (double d : planes_) z.push_back(in_.grid.plane + d);
    return {{"focus/planes", z, "m"}};
  }

private:
  void to_focus(FrameState& f, Ws& ws) const {
    if (!f.focus_valid) {
      // No trustworthy focus for this frame: leave the field where it is and
      // say so in /focus/distance (NaN comes from the autofocus record).
      return;
    }
    // The distance differs per frame, so the propagator is made per frame
    // (its transfer function comes from the shared cache when a distance
    // repeats). This allocates per frame: the price of a per-frame plane.
    propagate::PropagatorOptions o = opt_;
    o.method = propagate::Method::angular_spectrum;
    auto p = propagate::make_propagator(in_.height, in_.width, in_.grid, f.focus, o);
    if (ws.single.padded.height() != p->padded_height() || ws.single.padded.width() != p->padded_width())
      ws.single = p->make_workspace();
    p->apply(f.field.data.view(), f.field.data.view(), ws.single);
    f.field.grid = p->output_grid();
    f.distance += f.focus;
  }

  std::vector<double> planes_;
  bool at_focus_ = false;
  propagate::PropagatorOptions opt_;
  Shape in_;
  std::unique_ptr<propagate::Propagator> single_;
  std::unique_ptr<propagate::PlaneStack> stack_;
  Notes notes_;
};

} // namespace

std::unique_ptr<Stage> make_propagate(Params& p) { return std::make_unique<PropagateStage>(p); }

} // namespace wavestack::pipeline::stages
