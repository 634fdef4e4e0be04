// Stage "reference": remove the instrument's own wavefront by dividing the
// field by the field of the object-free background hologram, reconstructed
// by the same stages up to this point (the engine carries the background
// through the chain while planning). Double-exposure / reference-hologram
// compensation [common practice].
#include "stages.hpp"

#include <cmath>

namespace wavestack::pipeline::stages {
namespace {

class ReferenceStage final : public Stage {
public:
  explicit ReferenceStage(Params& p) {
    phase_only_ = p.choice("divide", {"field", "phase"}, "field") == "phase";
    // Background pixels darker than this fraction of its mean amplitude are
    // clamped, so dust and dead pixels do not blow up the division.
    floor_ = p.number_in("amplitude_floor", 0.0, 1.0, 0.05);
  }
  std::string_view type() const override { return "reference"; }
  Kind consumes() const override { return Kind::field; }
  Kind produces() const override { return Kind::field; }

  Shape plan(const Shape& in, PlanContext& ctx) override {
    if (!ctx.background() && !ctx.dry_run())
      fail_config("the reference stage needs an object-free hologram: set [input] background");
    const FrameState* bg = ctx.background_state();
    if (bg) {
      const Image<cfloat>& b = bg->field.data;
      double mean = 0;
      for (const cfloat& v : b) mean += std::abs(v);
      mean /= static_cast<double>(std::max<std::size_t>(b.size(), 1));
      const float lo = static_cast<float>(floor_ * mean);
      // Precompute the multiplier: conj(B)/|B|² (divide) or conj(B)/|B| (phase).
      inverse_.resize(b.height(), b.width());
      for (std::size_t i = 0; i < b.size(); ++i) {
        const float a = std::max(std::abs(b.data()[i]), lo);
        const cfloat unit = std::abs(b.data()[i]) > 0 ? b.data()[i] / std::abs(b.data()[i]) : cfloat(1, 0);
        inverse_.data()[i] = std::conj(unit) / (phase_only_ ? 1.0f : a);
      }
      notes_["reference"] = std::string("field divided by the reconstructed background") +
                            (phase_only_ ? " phase" : " field (amplitude and phase)");
    }
    return in;
  }
  void process(FrameState& f, StageWorkspace*) const override {
    if (inverse_.empty()) return; // dry run
    cfloat* u = f.field.data.data();
    const cfloat* m = inverse_.data();
    for (std::size_t i = 0; i < inverse_.size(); ++i) u[i] *= m[i];
  }
  Notes notes() const override { return notes_; }

private:
  bool phase_only_ = false;
  double floor_ = 0.05;
  Image<cfloat> inverse_;
  Notes notes_;
};

} // namespace

std::unique_ptr<Stage> make_reference(Params& p) { return std::make_unique<ReferenceStage>(p); }

} // namespace wavestack::pipeline::stages
