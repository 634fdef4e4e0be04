// Stage "autofocus": score a sweep of planes per frame and find the sharp
// one (modules/focus). The field stays where it is (DESIGN.md); a later
// propagate stage with distance = "focus" applies the result. Optionally
// tracks the focus from frame to frame (frames then pass this stage one at
// a time, in order) or focuses every object of the frame separately.
#include "stages.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/core/units.hpp"
#include "wavestack/focus/metric.hpp"
#include "wavestack/fringe/conditioner.hpp"
#include "wavestack/focus/objects.hpp"
#include "wavestack/focus/search.hpp"
#include "wavestack/focus/tracker.hpp"
#include "wavestack/render/plot.hpp"

#include <cmath>
#include <cstdio>
#include <filesystem>
#include <limits>
#include <sstream>

namespace wavestack::pipeline::stages {
namespace {

constexpr double nan = std::numeric_limits<double>::quiet_NaN();

class AutofocusStage final : public Stage {
public:
  explicit AutofocusStage(Params& p) {
    auto from = p.length("from"), to = p.length("to"), step = p.length("step");
    if (!from) p.fail("from", "missing: the first plane to score, e.g. from = \"-20 um\"");
    if (!to) p.fail("to", "missing: the last plane to score, e.g. to = \"20 um\"");
    if (!step) p.fail("step", "missing: the spacing of the planes, e.g. step = \"0.5 um\"");
    from_ = *from;
    to_ = *to;
    step_ = *step;
    if (!(step_ > 0)) p.fail("step", "must be a positive length");
    if (!(to_ > from_)) p.fail("to", "must be above from");
    // Each plane is one inverse FFT per frame: a sweep of millions is a unit slip.
    if ((to_ - from_) / step_ > 10000)
      p.fail("step", "the sweep from " + format_length(from_) + " to " + format_length(to_) + " in steps of " +
                         format_length(step_) + " has more than 10000 planes; use a larger step");
    std::string names = "\"auto\"";
    for (focus::Metric m : focus::all_metrics()) names += ", \"" + std::string(focus::info(m).name) + "\"";
    const std::string metric = p.string("metric", "auto");
    auto m = focus::parse_metric(metric);
    if (!m) p.fail("metric", "expected one of " + names + ", saw \"" + metric + "\"");
    opt_.metric = *m;
    opt_.refine_levels = static_cast<int>(p.number_in("refine_levels", 0, 20, opt_.refine_levels));
    opt_.min_snr = p.number_in("min_snr", 0, 1e6, opt_.min_snr);
    if (const toml::node* r = p.node("roi")) {
      const toml::array* a = r->as_array();
      if (!a || a->size() != 4 || !a->is_homogeneous(toml::node_type::integer))
        p.fail("roi", "expected [row, column, height, width] in output pixels, e.g. roi = [100, 120, 64, 64]");
      auto at = [&](std::size_t i) {
        const auto v = (*a)[i].as_integer()->get();
        if (v < 0) p.fail("roi", "pixel numbers must not be negative");
        return static_cast<std::size_t>(v);
      };
      opt_.roi = {at(0), at(1), at(2), at(3)};
      if (opt_.roi.whole()) p.fail("roi", "height and width must be positive");
    }
    track_ = p.boolean("track").value_or(false);
    half_window_ = static_cast<std::size_t>(p.number_in("window", 1, 10000, 8));
    objects_ = p.boolean("objects").value_or(false);
    if (objects_ && track_) p.fail("objects", "per-object focus does not track yet; use one of objects or track");
    if (objects_ && !opt_.roi.whole()) p.fail("roi", "a region of interest and per-object focus exclude each other");
    taper_ = p.number_in("taper_fraction", 0.0, 0.45, 0.1);
  }
  std::string_view type() const override { return "autofocus"; }
  Kind consumes() const override { return Kind::field; }
  Kind produces() const override { return Kind::field; }
  bool sequential() const override { return track_; }

  Shape plan(const Shape& in, PlanContext& ctx) override {
    if (in.planes) fail_config("autofocus needs a single plane, not a z-stack; put it before a stack propagation");
    h_ = in.height;
    w_ = in.width;
    base_plane_ = in.grid.plane;
    // A recorded field is not periodic: its border is a sharp edge at the
    // hologram plane that every sharpness metric would find "in focus". The
    // field is scored through a Tukey window (taper_fraction of each side,
    // Harris 1978), and by default only inside the untapered centre.
    window_y_ = fringe::tukey_window(h_, 2 * taper_);
    window_x_ = fringe::tukey_window(w_, 2 * taper_);
    if (opt_.roi.whole()) {
      // Keep out of the score what the border sends inwards over the sweep:
      // the taper plus the lateral spread |z|max·tanθ of the steepest wave
      // (sinθ = NA/n when the NA is known, else the grid's Nyquist angle).
      const double n = in.grid.medium_index, lambda = in.grid.medium_wavelength();
      double sin_t = ctx.instrument().numerical_aperture > 0 ? ctx.instrument().numerical_aperture / n
                                                             : std::min(0.95, lambda / (2 * std::min(in.grid.dx, in.grid.dy)));
      sin_t = std::min(sin_t, 0.95);
      const double reach = std::max(std::abs(from_), std::abs(to_)) * sin_t / std::sqrt(1 - sin_t * sin_t);
      const auto margin = [&](std::size_t len, double pitch) {
        return static_cast<std::size_t>(std::ceil(taper_ * static_cast<double>(len) + reach / pitch));
      };
      std::size_t my = margin(h_, in.grid.dy), mx = margin(w_, in.grid.dx);
      if (3 * my > h_ || 3 * mx > w_) {
        log::warn("autofocus: the sweep reaches " + format_length(reach) +
                      " sideways, too far to keep the frame border out of the score; scoring the centre third",
                  "autofocus-margin");
        my = h_ / 3;
        mx = w_ / 3;
      }
      opt_.roi = {my, mx, h_ - 2 * my, w_ - 2 * mx};
      notes_["autofocus_roi"] = "rows " + std::to_string(my) + ".." + std::to_string(h_ - my) + ", columns " +
                                std::to_string(mx) + ".." + std::to_string(w_ - mx) +
                                " (the border and what it spreads over the sweep are left out)";
    }
    // Noise-split blocks as wide as the field's noise correlation (its band
    // is the coherent cut-off NA/λ0 when the NA is known).
    const double na = ctx.instrument().numerical_aperture;
    opt_.band = na > 0 ? na / in.grid.wavelength : 0.0;
    opt_.split_tile = focus::split_block_for(in.grid, opt_.band);
    if (objects_) {
      focus::ObjectOptions oo;
      oo.search = opt_;
      oo.frame_roi = opt_.roi; // the frame's own focus, away from the border
      oo.search.roi = {};      // objects are found and boxed over the whole frame
      objects_focuser_ = std::make_unique<focus::ObjectFocuser>(h_, w_, in.grid, from_, to_, step_, oo);
      distances_.assign(objects_focuser_->distances().begin(), objects_focuser_->distances().end());
    } else {
      search_ = std::make_shared<focus::Search>(h_, w_, in.grid, from_, to_, step_, opt_);
      distances_.assign(search_->distances().begin(), search_->distances().end());
      if (track_) tracker_ = std::make_unique<focus::Tracker>(search_, focus::TrackerOptions{half_window_});
    }
    std::ostringstream s;
    s << distances_.size() << " planes from " << format_length(distances_.front()) << " to "
      << format_length(distances_.back()) << " (step " << format_length(step_) << "), metric "
      << focus::info(focus::resolve(opt_.metric)).name << (track_ ? ", tracked from frame to frame" : "")
      << (objects_ ? ", per object" : "") << "; noise split in " << opt_.split_tile << " px blocks";
    notes_["autofocus"] = s.str();
    Shape out = in;
    out.focus_available = true;
    return out;
  }
  void reset() override {
    if (tracker_) tracker_->reset();
  }

  struct Ws final : StageWorkspace {
    focus::Search::Workspace search;
    focus::ObjectFocuser::Workspace objects;
    focus::FocusResult result;
    focus::ObjectTable table;
    Image<cfloat> windowed;
  };
  std::unique_ptr<StageWorkspace> make_workspace() const override {
    auto ws = std::make_unique<Ws>();
    if (search_) ws->search = search_->make_workspace();
    if (objects_focuser_) ws->objects = objects_focuser_->make_workspace();
    ws->windowed.resize(h_, w_);
    return ws;
  }

  void process(FrameState& f, StageWorkspace* wsp) const override {
    auto& ws = *static_cast<Ws*>(wsp);
    for (std::size_t y = 0; y < h_; ++y) {
      const cfloat* src = f.field.data.row(y);
      cfloat* dst = ws.windowed.row(y);
      const float wy = static_cast<float>(window_y_[y]);
      for (std::size_t x = 0; x < w_; ++x) dst[x] = src[x] * (wy * static_cast<float>(window_x_[x]));
    }
    const focus::FocusResult* r = nullptr;
    if (tracker_) {
      r = &tracker_->track(ws.windowed.view(), ws.search);
    } else if (search_) {
      search_->run(ws.windowed.view(), ws.result, ws.search);
      r = &ws.result;
    } else {
      objects_focuser_->run(ws.windowed.view(), ws.table, ws.objects);
      r = &ws.table.frame;
      auto& rows = table(f, 0);
      for (const focus::ObjectFocus& o : ws.table.objects) {
        const double row[] = {static_cast<double>(o.id), o.centroid_y, o.centroid_x, o.centroid_y_m, o.centroid_x_m,
                              static_cast<double>(o.area), o.sure ? f.field.grid.plane + o.distance : nan,
                              o.confidence, o.sure ? 1.0 : 0.0};
        rows.insert(rows.end(), std::begin(row), std::end(row));
      }
    }
    f.focus_valid = r->sure;
    f.focus = r->sure ? r->distance : nan;
    f.focus_plane = r->sure ? f.field.grid.plane + r->distance : nan;
    record(f, 0)[0] = r->confidence;
    record(f, 1)[0] = r->sure ? 1.0 : 0.0;
    std::copy(r->curve.begin(), r->curve.end(), record(f, 2).begin());
    if (!r->sure && f.source_index >= 0) // not for the background probe of planning
      log::warn("frame " + std::to_string(f.source_index) + ": no clear focus (" + focus::to_string(r->reason) +
                "); the field is left at its plane");
  }

  std::vector<RecordSpec> records() const override {
    return {{"focus/confidence", 0, "1", {{"description", "prominence-based confidence of the focus, 0..1"}}},
            {"focus/sure", 0, "1", {{"description", "1 when the focus curve has a clear extremum"}}},
            {"focus/curve", distances_.size(), "1",
             {{"metric", std::string(focus::info(focus::resolve(opt_.metric)).name)}}}};
  }
  std::vector<TableSpec> tables() const override {
    if (!objects_) return {};
    return {{"focus/objects",
             {"object", "centroid_row", "centroid_column", "centroid_y", "centroid_x", "area", "distance",
              "confidence", "sure"},
             {true, false, false, false, false, true, false, false, true},
             {"1", "px", "px", "m", "m", "px", "m", "1", "1"}}};
  }
  std::vector<ConstantSpec> constants() const override {
    std::vector<double> z;
    for (double d : distances_) z.push_back(base_plane_ + d);
    return {{"focus/distances", z, "m"}};
  }
  Notes notes() const override { return notes_; }

  void preview(const FrameState& f, const std::string& folder, std::vector<std::string>& written) const override {
    std::vector<double> xs, ys;
    const auto& curve = f.records[record_base + 2];
    for (std::size_t i = 0; i < distances_.size(); ++i)
      if (std::isfinite(curve[i])) {
        xs.push_back((base_plane_ + distances_[i]) * 1e6);
        ys.push_back(curve[i]);
      }
    if (xs.size() < 2) return;
    char name[64];
    std::snprintf(name, sizeof name, "frame%05lld_focus_curve.png", static_cast<long long>(f.source_index));
    const std::string path = (std::filesystem::path(folder) / name).string();
    std::optional<double> mark;
    if (f.focus_valid) mark = f.focus_plane * 1e6;
    render::write_curve_plot(path, xs, ys, "plane (um)", std::string(focus::info(focus::resolve(opt_.metric)).name),
                             mark, "focus curve, frame " + std::to_string(f.source_index));
    written.push_back(path);
  }

private:
  double from_ = 0, to_ = 0, step_ = 0, base_plane_ = 0;
  double taper_ = 0.1;
  std::vector<double> window_y_, window_x_;
  focus::SearchOptions opt_;
  bool track_ = false, objects_ = false;
  std::size_t half_window_ = 8;
  std::size_t h_ = 0, w_ = 0;
  std::vector<double> distances_;
  std::shared_ptr<focus::Search> search_;
  std::unique_ptr<focus::Tracker> tracker_; // used by one frame at a time (sequential)
  std::unique_ptr<focus::ObjectFocuser> objects_focuser_;
  Notes notes_;
};

} // namespace

std::unique_ptr<Stage> make_autofocus(Params& p) { return std::make_unique<AutofocusStage>(p); }

} // namespace wavestack::pipeline::stages
