// Measurement stages on the unwrapped phase (modules/wavefront, quantify):
//   flatten  - fit and subtract the instrument's tilt/curvature over the
//              background (polynomial or Zernike terms), coefficients per frame;
//   zernike  - wavefront report over a circular pupil: ANSI coefficients in
//              nm, PV, RMS, Strehl (Maréchal, with a validity warning);
//   drymass  - segment objects on the OPD map and tabulate area, OPD and
//              dry mass per object.
// Each is phase -> phase; only flatten changes the phase.
#include "mask_file.hpp"
#include "stages.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/io/frame_source.hpp"
#include "wavestack/quantify/objects.hpp"
#include "wavestack/wavefront/background.hpp"
#include "wavestack/wavefront/report.hpp"
#include "wavestack/wavefront/zernike.hpp"

#include <cmath>
#include <filesystem>
#include <numbers>
#include <sstream>

namespace wavestack::pipeline::stages {
namespace {

/// Plane size check shared by the phase stages.
void single_plane(const Shape& in, const char* type) {
  if (in.planes)
    fail_config(std::string(type) + " works on one plane per frame, not on a z-stack");
}

std::vector<int> ansi_list(Params& p, const char* key, std::vector<int> fallback) {
  const toml::node* n = p.node(key);
  if (!n) return fallback;
  const toml::array* a = n->as_array();
  if (!a || a->empty() || !a->is_homogeneous(toml::node_type::integer))
    p.fail(key, "expected a list of ANSI Zernike indices such as [0, 1, 2, 4]");
  std::vector<int> out;
  for (const auto& e : *a) {
    const auto v = e.as_integer()->get();
    if (v < 0 || v > 230) p.fail(key, "ANSI indices run from 0 to 230");
    out.push_back(static_cast<int>(v));
  }
  return out;
}

class FlattenStage final : public Stage {
public:
  explicit FlattenStage(Params& p) {
    const std::string model = p.choice("model", {"polynomial", "zernike"}, "polynomial");
    opt_.model = model == "zernike" ? wavefront::BackgroundModel::zernike : wavefront::BackgroundModel::polynomial;
    opt_.degree = static_cast<int>(p.number_in("degree", 0, 8, 2));
    opt_.zernike_terms = ansi_list(p, "terms", opt_.zernike_terms);
    const std::string region = p.choice("region", {"auto", "all", "mask"}, "auto");
    opt_.region = region == "all"    ? wavefront::BackgroundRegion::all
                  : region == "mask" ? wavefront::BackgroundRegion::mask
                                     : wavefront::BackgroundRegion::automatic;
    mask_ = MaskFile::from(p); // non-zero = background
    if (opt_.region == wavefront::BackgroundRegion::mask && !mask_.given())
      p.fail("mask", "region = \"mask\" needs mask = \"file.h5:/dataset\" (non-zero pixels are background)");
  }
  std::string_view type() const override { return "flatten"; }
  Kind consumes() const override { return Kind::phase; }
  Kind produces() const override { return Kind::phase; }
  Shape plan(const Shape& in, PlanContext&) override {
    single_plane(in, "flatten");
    if (mask_.given()) opt_.mask = mask_.load(in.height, in.width, "background");
    comp_ = std::make_unique<wavefront::BackgroundCompensator>(in.height, in.width, opt_);
    std::string names;
    for (int k = 0; k < comp_->terms(); ++k) {
      if (k) names.append(",");
      names.append(comp_->term_name(k));
    }
    names_ = names;
    notes_["flatten"] = std::to_string(comp_->terms()) + " terms (" + names + ") fitted over the " +
                        (opt_.region == wavefront::BackgroundRegion::all ? "whole frame" : "background found per frame");
    return in;
  }
  struct Ws final : StageWorkspace {
    wavefront::BackgroundCompensator::Workspace w;
    Image<float> amplitude;
    std::vector<double> coef;
  };
  std::unique_ptr<StageWorkspace> make_workspace() const override {
    auto ws = std::make_unique<Ws>();
    ws->w = comp_->make_workspace();
    ws->amplitude.resize(comp_->height(), comp_->width());
    ws->coef.resize(static_cast<std::size_t>(comp_->terms()));
    return ws;
  }
  void process(FrameState& f, StageWorkspace* wsp) const override {
    auto& ws = *static_cast<Ws*>(wsp);
    for (std::size_t i = 0; i < ws.amplitude.size(); ++i) ws.amplitude.data()[i] = std::abs(f.field.data.data()[i]);
    auto fit = comp_->apply(f.phase.view(), ws.amplitude.view(), f.phase.view(), ws.coef, ws.w);
    std::copy(ws.coef.begin(), ws.coef.end(), record(f, 0).begin());
    record(f, 1)[0] = fit.residual_rms;
    record(f, 2)[0] = static_cast<double>(fit.background_pixels);
  }
  std::vector<RecordSpec> records() const override {
    return {{"compensation/coefficients", static_cast<std::size_t>(comp_->terms()), "rad",
             {{"terms", names_}, {"coordinates", "pixel offsets from the frame centre divided by " +
                                                     std::to_string(comp_->coordinate_scale()) + " px"}}},
            {"compensation/residual_rms", 0, "rad", {}},
            {"compensation/background_pixels", 0, "1", {}}};
  }
  Notes notes() const override { return notes_; }

private:
  wavefront::BackgroundOptions opt_;
  MaskFile mask_;
  std::unique_ptr<wavefront::BackgroundCompensator> comp_;
  std::string names_;
  Notes notes_;
};

class ZernikeStage final : public Stage {
public:
  explicit ZernikeStage(Params& p) {
    opt_.terms = static_cast<int>(p.number_in("terms", 3, 231, 15));
    if (auto c = p.number("center_row")) opt_.pupil.cy = *c;
    if (auto c = p.number("center_column")) opt_.pupil.cx = *c;
    opt_.pupil.radius = p.number_in("radius", 0, 1e6, 0);
  }
  std::string_view type() const override { return "zernike"; }
  Kind consumes() const override { return Kind::phase; }
  Kind produces() const override { return Kind::phase; }
  Shape plan(const Shape& in, PlanContext&) override {
    single_plane(in, "zernike");
    opt_.wavelength = in.grid.wavelength;
    an_ = std::make_unique<wavefront::WavefrontAnalyzer>(in.height, in.width, opt_);
    notes_["zernike"] = std::to_string(opt_.terms) + " ANSI Zernike terms (ANSI Z80.28) over a pupil of radius " +
                        (opt_.pupil.radius > 0 ? std::to_string(opt_.pupil.radius) + " px" : "min(h, w)/2 (inscribed)");
    return in;
  }
  struct Ws final : StageWorkspace {
    wavefront::WavefrontAnalyzer::Workspace w;
    wavefront::WavefrontReport report;
  };
  std::unique_ptr<StageWorkspace> make_workspace() const override {
    auto ws = std::make_unique<Ws>();
    ws->w = an_->make_workspace();
    ws->report = an_->make_report();
    return ws;
  }
  void process(FrameState& f, StageWorkspace* wsp) const override {
    auto& ws = *static_cast<Ws*>(wsp);
    an_->analyze(f.phase.view(), ws.report, ws.w);
    const auto& r = ws.report;
    std::copy(r.coefficients_nm.begin(), r.coefficients_nm.end(), record(f, 0).begin());
    const double summary[] = {r.pv_nm, r.rms_nm, r.pv_no_tilt_nm, r.rms_no_tilt_nm, r.strehl_marechal,
                              r.strehl_exponential, r.strehl_direct};
    std::copy(std::begin(summary), std::end(summary), record(f, 1).begin());
    auto& rows = table(f, 0);
    for (int j = 0; j < opt_.terms; ++j) {
      const auto nm = wavefront::ansi_to_nm(j);
      const double row[] = {static_cast<double>(j), static_cast<double>(nm.n), static_cast<double>(nm.m),
                            r.coefficients_nm[static_cast<std::size_t>(j)]};
      rows.insert(rows.end(), std::begin(row), std::end(row));
    }
    if (!r.strehl_reliable && f.source_index >= 0) {
      std::ostringstream s;
      s << "frame " << f.source_index << ": wavefront RMS " << r.rms_no_tilt_nm << " nm (" << r.sigma_rad
        << " rad) is beyond the Maréchal approximation (exp(-sigma^2) < 0.6, Mahajan 1982); "
           "use /wavefront/summary's direct Strehl";
      log::warn(s.str(), "strehl");
    }
  }
  std::vector<RecordSpec> records() const override {
    std::string index;
    for (int j = 0; j < opt_.terms; ++j) {
      const auto nm = wavefront::ansi_to_nm(j);
      if (j) index.append(";");
      index.append(std::to_string(j)).append(":").append(std::to_string(nm.n)).append(",");
      index.append(std::to_string(nm.m)).append(":").append(wavefront::zernike_name(j));
    }
    return {{"wavefront/zernike", static_cast<std::size_t>(opt_.terms), "nm",
             {{"index", index}, {"convention", "ANSI Z80.28 single index j = (n(n+2)+m)/2, unit-RMS normalisation"}}},
            {"wavefront/summary", 7, "nm",
             {{"columns", "pv_nm,rms_nm,pv_no_tilt_nm,rms_no_tilt_nm,strehl_marechal,strehl_exponential,"
                          "strehl_direct"},
              {"note", "strehl columns are dimensionless"}}}};
  }
  std::vector<TableSpec> tables() const override {
    return {{"wavefront/zernike_table", {"j", "n", "m", "coefficient"}, {true, true, true, false},
             {"1", "1", "1", "nm"}}};
  }
  Notes notes() const override { return notes_; }

private:
  wavefront::WavefrontOptions opt_;
  std::unique_ptr<wavefront::WavefrontAnalyzer> an_;
  Notes notes_;
};

class DryMassStage final : public Stage {
public:
  explicit DryMassStage(Params& p) {
    const std::string t = p.choice("threshold", {"robust", "fixed", "otsu"}, "robust");
    opt_.threshold = t == "fixed" ? quantify::ThresholdMode::fixed
                     : t == "otsu" ? quantify::ThresholdMode::otsu
                                   : quantify::ThresholdMode::robust;
    if (auto v = p.length("threshold_opd")) opt_.threshold_nm = *v * 1e9;
    opt_.robust_sigmas = p.number_in("sigmas", 0.1, 100, opt_.robust_sigmas);
    opt_.min_area_pixels = static_cast<std::size_t>(p.number_in("min_area_pixels", 1, 1e9, 20));
    opt_.fill_holes = p.boolean("fill_holes").value_or(false);
    opt_.exclude_border = p.boolean("exclude_border").value_or(false);
    // α in µm³/pg (= mL/g): Barer 1952; Popescu et al. 2008.
    opt_.alpha = p.number_in("alpha", 0.01, 0.99, opt_.alpha);
  }
  std::string_view type() const override { return "drymass"; }
  Kind consumes() const override { return Kind::phase; }
  Kind produces() const override { return Kind::phase; }
  Shape plan(const Shape& in, PlanContext&) override {
    single_plane(in, "drymass");
    an_ = std::make_unique<quantify::ObjectAnalyzer>(in.height, in.width, in.grid, opt_);
    nm_per_rad_ = in.grid.wavelength * 1e9 / (2 * std::numbers::pi);
    std::ostringstream s;
    s << "objects segmented on the OPD map, dry mass m = OPD integral / alpha with alpha = " << opt_.alpha
      << " um^3/pg";
    notes_["drymass"] = s.str();
    return in;
  }
  struct Ws final : StageWorkspace {
    quantify::ObjectAnalyzer::Workspace w;
    quantify::ObjectTable table;
    Image<float> opd;
  };
  std::unique_ptr<StageWorkspace> make_workspace() const override {
    auto ws = std::make_unique<Ws>();
    ws->w = an_->make_workspace();
    return ws;
  }
  void process(FrameState& f, StageWorkspace* wsp) const override {
    auto& ws = *static_cast<Ws*>(wsp);
    ws.opd.resize(f.phase.height(), f.phase.width());
    const float k = static_cast<float>(nm_per_rad_);
    for (std::size_t i = 0; i < ws.opd.size(); ++i) ws.opd.data()[i] = f.phase.data()[i] * k;
    an_->analyze(ws.opd.view(), ws.table, ws.w);
    auto& rows = table(f, 0);
    for (const auto& o : ws.table.objects) {
      const double row[] = {static_cast<double>(o.id), o.centroid_row, o.centroid_col, o.centroid_y_m,
                            o.centroid_x_m, o.area_um2, o.mean_opd_nm, o.peak_opd_nm, o.opd_integral_um3,
                            o.dry_mass_pg, o.touches_border ? 1.0 : 0.0};
      rows.insert(rows.end(), std::begin(row), std::end(row));
    }
    record(f, 0)[0] = static_cast<double>(ws.table.objects.size());
  }
  std::vector<RecordSpec> records() const override { return {{"objects/count", 0, "1", {}}}; }
  std::vector<TableSpec> tables() const override {
    return {{"objects/mass",
             {"object", "centroid_row", "centroid_column", "centroid_y", "centroid_x", "area", "mean_opd",
              "peak_opd", "opd_integral", "dry_mass", "touches_border"},
             {true, false, false, false, false, false, false, false, false, false, true},
             {"1", "px", "px", "m", "m", "um^2", "nm", "nm", "um^3", "pg", "1"}}};
  }
  Notes notes() const override { return notes_; }

private:
  quantify::ObjectOptions opt_;
  std::unique_ptr<quantify::ObjectAnalyzer> an_;
  double nm_per_rad_ = 0;
  Notes notes_;
};

} // namespace

std::unique_ptr<Stage> make_flatten(Params& p) { return std::make_unique<FlattenStage>(p); }
std::unique_ptr<Stage> make_zernike(Params& p) { return std::make_unique<ZernikeStage>(p); }
std::unique_ptr<Stage> make_drymass(Params& p) { return std::make_unique<DryMassStage>(p); }

} // namespace wavestack::pipeline::stages
