// Stage "sideband": carrier search and demodulation (modules/sideband).
#include "stages.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/sideband/carrier.hpp"
#include "wavestack/sideband/demodulator.hpp"

#include <cmath>
#include <sstream>

namespace wavestack::pipeline::stages {
namespace {

class SidebandStage final : public Stage {
public:
  explicit SidebandStage(Params& p) {
    order_text_ = p.choice("order", {"auto", "+1", "-1"}, "auto");
    if (const toml::node* r = p.node("radius")) {
      if (auto s = r->as_string()) {
        if (s->get() != "auto") p.fail("radius", "expected \"auto\" or a fraction of the carrier distance such as 0.3");
      } else if (r->is_number()) {
        fraction_ = p.number_in("radius", 1e-3, 1.0, 1.0 / 3.0);
      } else {
        p.fail("radius", "expected \"auto\" or a fraction of the carrier distance such as 0.3");
      }
    }
    soft_edge_ = p.number_in("soft_edge", 0.0, 1.0, 0.1);
  }
  std::string_view type() const override { return "sideband"; }
  Kind consumes() const override { return Kind::hologram; }
  Kind produces() const override { return Kind::field; }

  Shape plan(const Shape& in, PlanContext& ctx) override {
    const Instrument& ins = ctx.instrument();
    sideband::Order order = order_text_ == "-1" ? sideband::Order::minus1 : sideband::Order::plus1;
    sideband::Carrier carrier;
    if (ins.carrier && order_text_ == "auto") {
      // The profile names the lobe of the object wave: demodulate that one.
      const auto [fy, fx] = *ins.carrier;
      carrier = sideband::carrier_from_frequency(fy, fx, in.height, in.width, in.grid);
      const bool mirrored = std::abs(carrier.fx - fx) > 1e-9 * std::abs(fx) + 1e-12 ||
                            std::abs(carrier.fy - fy) > 1e-9 * std::abs(fy) + 1e-12;
      if (mirrored) order = sideband::Order::minus1;
      notes_["carrier"] = "from the instrument profile: " + sideband::describe(carrier, in.grid);
    } else if (ctx.dry_run()) {
      // No frames in a dry run: plan the shapes with a carrier at half the
      // Nyquist frequency on both axes; the real one is found when running.
      const double fy = 0.5 / (2 * in.grid.dy), fx = 0.5 / (2 * in.grid.dx);
      carrier = sideband::carrier_from_frequency(fy, fx, in.height, in.width, in.grid);
      notes_["carrier"] = "found on the first selected frame when the pipeline runs";
    } else {
      sideband::CarrierSearchOptions so;
      so.numerical_aperture = ins.numerical_aperture;
      so.wavelength = ins.wavelength;
      carrier = sideband::find_carrier(ctx.probe_hologram(), in.grid, so);
      notes_["carrier"] = sideband::describe(carrier, in.grid);
    }
    sideband::DemodulatorOptions dopt;
    dopt.soft_edge = soft_edge_;
    if (fraction_ > 0) {
      dopt.radius_fraction = fraction_;
    } else if (ins.numerical_aperture > 0) {
      dopt.numerical_aperture = ins.numerical_aperture;
    }
    dopt.dc_exclusion = ins.numerical_aperture > 0
                            ? sideband::dc_exclusion_radius(in.grid, ins.numerical_aperture, ins.wavelength, 0)
                            : 0;
    demod_ = std::make_unique<sideband::Demodulator>(in.height, in.width, in.grid, carrier, order, dopt);
    std::ostringstream s;
    s << sideband::to_string(order) << " order, mask radius " << demod_->radius() * 1e-6 << " cycles/um"
      << (fraction_ > 0 ? " (fraction of the carrier distance)"
          : ins.numerical_aperture > 0 ? " (NA/wavelength)"
                                       : " (1/3 of the carrier distance)")
      << ", crop " << demod_->crop_height() << "x" << demod_->crop_width();
    notes_["sideband"] = s.str();
    Shape out;
    out.kind = Kind::field;
    out.height = demod_->crop_height();
    out.width = demod_->crop_width();
    out.grid = demod_->output_grid();
    return out;
  }

  struct Ws final : StageWorkspace {
    sideband::Demodulator::Workspace w;
  };
  std::unique_ptr<StageWorkspace> make_workspace() const override {
    auto ws = std::make_unique<Ws>();
    ws->w = demod_->make_workspace();
    return ws;
  }
  void process(FrameState& f, StageWorkspace* ws) const override {
    f.field.data.resize(demod_->crop_height(), demod_->crop_width()); // allocates once per token
    f.field.grid = demod_->output_grid();
    demod_->apply(f.hologram.view(), f.field.data.view(), static_cast<Ws*>(ws)->w);
  }
  Notes notes() const override { return notes_; }

private:
  std::string order_text_;
  double fraction_ = 0; ///< > 0 when radius is given as a fraction
  double soft_edge_ = 0.1;
  std::unique_ptr<sideband::Demodulator> demod_;
  Notes notes_;
};

} // namespace

std::unique_ptr<Stage> make_sideband(Params& p) { return std::make_unique<SidebandStage>(p); }

} // namespace wavestack::pipeline::stages
