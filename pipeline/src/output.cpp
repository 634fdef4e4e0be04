#include "output.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/core/units.hpp"
#include "wavestack/render/preview.hpp"

#include <algorithm>
#include <cerrno>
#include <chrono>
#include <optional>
#include <cmath>
#include <cstring>
#include <limits>
#include <memory>
#include <cstdio>
#include <filesystem>
#include <numbers>

namespace fs = std::filesystem;

namespace wavestack::pipeline {
namespace {
bool has(const std::vector<std::string>& v, const char* s) {
  for (const auto& x : v)
    if (x == s) return true;
  return false;
}
} // namespace

std::string preview_folder(const std::string& output_path) {
  fs::path p(output_path);
  return (p.parent_path() / (p.stem().string() + "_previews")).string();
}

std::string table_csv_path(const std::string& output_path, const std::string& table) {
  fs::path p(output_path);
  std::string t = table;
  for (char& c : t)
    if (c == '/') c = '_';
  return (p.parent_path() / (p.stem().string() + "_" + t + ".csv")).string();
}

namespace {

/// The first line where two texts differ, for a resume refusal.
std::string first_difference(const std::string& a, const std::string& b) {
  std::size_t line = 1, i = 0;
  while (i < a.size() && i < b.size() && a[i] == b[i]) {
    if (a[i] == '\n') ++line;
    ++i;
  }
  auto line_at = [](const std::string& t, std::size_t pos) {
    const std::size_t from = t.rfind('\n', pos == 0 ? 0 : pos - 1);
    const std::size_t begin = from == std::string::npos || pos == 0 ? 0 : from + 1;
    const std::size_t stop = t.find('\n', begin);
    return "'" + t.substr(begin, stop == std::string::npos ? std::string::npos : stop - begin) + "'";
  };
  return "line " + std::to_string(line) + ": " + line_at(b, i) + " was " + line_at(a, i);
}

/// --resume continues only the very same run: same pipeline text, same
/// input data, same frame selection.
void check_same_run(const io::FrameSink& sink, const Pipeline& pl, const PlanSummary& plan) {
  const ErrorContext c = in_file(sink.partial_file());
  const std::string old_text = sink.root_text_attribute("pipeline");
  if (old_text != pl.text())
    fail_config("cannot resume: the pipeline differs from the one the partial file was started with (" +
                    first_difference(old_text, pl.text()) + "); rerun without --resume to start over",
                c);
  const std::string old_print = sink.root_text_attribute("source_fingerprint");
  if (old_print != plan.source_fingerprint)
    fail_input("cannot resume: the input data differ from the data the partial file was started with (was " +
                   old_print + ", now " + plan.source_fingerprint + "); rerun without --resume to start over",
               c);
  const std::string old_sel = sink.root_text_attribute("frames_selected");
  if (old_sel != plan.selection || sink.frames() != plan.frames.size())
    fail_config("cannot resume: the partial file was started for the frames \"" + old_sel + "\", this run selects \"" +
                    plan.selection + "\"; give the same --frames or rerun without --resume",
                c);
}

io::FrameSink open_sink(const Pipeline& pl, const PlanSummary& plan, bool resume, bool& resumed) {
  // Never write over the raw data (DESIGN.md: raw data is never overwritten).
  if (io::same_file(pl.output.path, pl.input.path) || pl.output.path == pl.input.path)
    fail_config("the output path is the input file; choose another [output] path so the raw data stays intact",
                in_file(pl.output.path));
  if (!pl.input.background_path.empty() && io::same_file(pl.output.path, pl.input.background_path))
    fail_config("the output path is the background file; choose another [output] path", in_file(pl.output.path));
  // Make the output folder when it is missing (like the previews').
  const fs::path parent = fs::path(pl.output.path).parent_path();
  if (!parent.empty()) {
    std::error_code ec;
    fs::create_directories(parent, ec);
    if (ec) fail_output("cannot create the output folder: " + ec.message(), in_file(parent.string()));
  }
  if (pl.output.preview_every >= 0) { // before the partial file exists, so a refusal leaves nothing
    std::error_code pec;
    fs::create_directories(preview_folder(pl.output.path), pec);
    if (pec) fail_output("cannot create the preview folder: " + pec.message(), in_file(preview_folder(pl.output.path)));
  }
  resumed = false;
  const std::string partial = io::FrameSink::partial_path(pl.output.path);
  std::error_code ec;
  if (resume && fs::exists(partial, ec)) {
    std::optional<io::FrameSink> old;
    try {
      old.emplace(io::FrameSink::open_for_resume(partial));
    } catch (const Error& e) {
      // Killed before the file's structure reached the disk: nothing of it
      // can be trusted, and nothing was done yet that it could keep.
      log::warn("the partial output cannot be continued (" + std::string(e.what()) + "); starting the run over");
    }
    if (old) {
      check_same_run(*old, pl, plan);
      resumed = true;
      return std::move(*old);
    }
  } else if (resume) {
    log::info("there is no partial output " + partial + " to continue; starting the run");
  }
  io::SinkInfo info;
  info.software_version = WAVESTACK_VERSION;
  info.pipeline = pl.text();
  info.source_file = pl.input.path;
  info.source_dataset = pl.input.dataset;
  io::CompressionOptions c;
  c.method = pl.output.compression == "deflate" ? io::Compression::deflate : io::Compression::none;
  c.level = pl.output.level;
  return io::FrameSink::create(pl.output.path, plan.frames.size(), info, c);
}

} // namespace

OutputFile::OutputFile(const Pipeline& pl, const PlanSummary& plan, bool resume)
    : pl_(pl), plan_(plan), sink_(open_sink(pl, plan, resume, resumed_)) {
  const auto& prods = pl.output.products;
  field_ = has(prods, "field");
  amplitude_ = has(prods, "amplitude");
  phase_ = has(prods, "phase");
  opd_ = has(prods, "opd");
  height_ = has(prods, "height");
  compress_ = pl.output.compression == "deflate";
  const Shape& s = plan.output;
  const bool unwrapped = s.kind == Kind::phase;
  const std::int64_t wrapped = unwrapped ? 0 : 1;
  // `plane` only when every frame has the same one (DESIGN.md); a z-stack
  // has its planes in /focus/planes instead.
  const bool plane = !s.plane_varies && s.planes == 0;
  auto image = [&](const char* name, io::ImageType type, const char* units, const io::Attributes& extra) {
    if (resumed_) return existing(name);
    return sink_.add_stack(name, type, s.planes, s.height, s.width, units, s.grid, plane, extra);
  };
  if (field_) h_field_ = image("field", io::ImageType::complex64, "1", {});
  if (amplitude_) h_amplitude_ = image("amplitude", io::ImageType::f32, "1", {});
  if (phase_) h_phase_ = image("phase", io::ImageType::f32, "rad", {{"wrapped", wrapped}});
  if (opd_) h_opd_ = image("opd", io::ImageType::f32, "nm", {{"wrapped", wrapped}});
  if (height_) {
    // Transmission: h = OPD/Δn; reflection: h = OPD/2 (the light crosses the
    // height twice) [common practice].
    const bool refl = pl.output.height == "reflection";
    height_per_nm_ = refl ? 0.5f : static_cast<float>(1.0 / pl.output.index_difference);
    h_height_ = image("height", io::ImageType::f32, "nm",
                      {{"wrapped", wrapped},
                       {"mode", pl.output.height},
                       {"formula", std::string(refl ? "h = OPD/2" : "h = OPD/index_difference")},
                       {"index_difference", pl.output.index_difference}});
  }
  // What the stages record per frame, and what they know once.
  for (const RecordSpec& r : plan.records) {
    io::Attributes extra;
    for (const auto& [k, v] : r.attributes) extra.push_back({k, v});
    if (resumed_) {
      h_records_.push_back(existing(r.name));
      continue;
    }
    h_records_.push_back(r.columns ? sink_.add_matrix(r.name, io::ValueType::f64, plan.frames.size(), r.columns,
                                                      r.units, extra)
                                   : sink_.add_vector(r.name, io::ValueType::f64, plan.frames.size(), r.units, extra));
  }
  for (const ConstantSpec& c : plan.constants) {
    if (resumed_) continue; // written when the partial file was made
    sink_.add_constant(c.name, c.values, c.units);
  }
  table_values_.assign(plan.tables.size(), 0);
  // What the run was, in attributes a reader's script can use directly.
  const Instrument& ins = pl.instrument;
  sink_.set_attribute("/", "wavelength", ins.wavelength);
  sink_.set_attribute("/", "camera_pixel_pitch", ins.pixel_pitch);
  sink_.set_attribute("/", "magnification", ins.magnification);
  sink_.set_attribute("/", "numerical_aperture", ins.numerical_aperture);
  sink_.set_attribute("/", "medium_index", ins.medium_index);
  sink_.set_attribute("/", "frames_selected", plan.selection);
  sink_.set_attribute("/", "source_fingerprint", plan.source_fingerprint);
  if (!pl.profile_file.empty()) sink_.set_attribute("/", "instrument_profile", pl.profile_file);
  for (const auto& [k, v] : plan.notes) sink_.set_attribute("/", k, v);
  if (!pl.input.background_path.empty())
    sink_.set_attribute("/", "background", pl.input.background_path + ":" + pl.input.background_dataset);

  if (pl.output.preview_every >= 0) {
    preview_dir_ = preview_folder(pl.output.path);
    std::error_code ec;
    fs::create_directories(preview_dir_, ec);
    if (ec) fail_output("cannot create the preview folder: " + ec.message(), in_file(preview_dir_));
  }
  if (resumed_) {
    start_ = sink_.done_prefix();
    RunJournal::Contents kept;
    journal_.emplace(RunJournal::resume(pl.output.path, start_, plan.tables.size(), kept));
    table_values_ = std::move(kept.table_values);
    resumed_warnings_ = std::move(kept.warnings);
  } else {
    journal_.emplace(RunJournal::create(pl.output.path));
  }
  // The structure of the file is on disk before the first frame is.
  sink_.checkpoint();
  last_checkpoint_ = std::chrono::steady_clock::now();
}

io::FrameSink::Product OutputFile::existing(const std::string& name) const {
  if (!sink_.has_product(name))
    fail_output("cannot resume: the partial file has no dataset " + name + "; rerun without --resume",
                in_file(sink_.partial_file()));
  return sink_.product(name);
}

OutputFile::~OutputFile() {
  if (!finished_) {
    // A failed run leaves nothing that looks like a result.
    std::error_code ec;
    for (const auto& p : previews_) fs::remove(p, ec);
  }
}

void OutputFile::size_products(Products& p) const {
  const Shape& s = plan_.output;
  const std::size_t rows = s.height * std::max<std::size_t>(s.planes, 1);
  if (amplitude_ || pl_.output.preview_every >= 0) p.amplitude.resize(rows, s.width);
  if (phase_ || opd_ || height_ || pl_.output.preview_every >= 0) p.phase.resize(rows, s.width);
  if (opd_ || height_) p.opd.resize(rows, s.width);
  if (height_) p.height.resize(rows, s.width);
}

bool OutputFile::wants_preview(std::size_t i) const {
  const int k = pl_.output.preview_every;
  if (k < 0) return false;
  if (k == 0) return i == 0;
  return i % static_cast<std::size_t>(k) == 0;
}

void OutputFile::compute(const FrameState& f, Products& p) const {
  const std::size_t n = f.field.data.size();
  const cfloat* u = f.field.data.data();
  // Amplitude and phase are only computed when a product or this frame's
  // preview needs them (the buffers exist for previews of other frames too).
  const bool preview = wants_preview(f.output_index);
  if (amplitude_ || preview)
    for (std::size_t i = 0; i < n; ++i) p.amplitude.data()[i] = std::abs(u[i]);
  if (phase_ || opd_ || height_ || preview) {
    if (f.kind == Kind::phase) std::copy(f.phase.begin(), f.phase.end(), p.phase.begin());
    else
      for (std::size_t i = 0; i < n; ++i) p.phase.data()[i] = std::arg(u[i]);
  }
  if (opd_ || height_) {
    // OPD = φ·λ0/(2π), in nm (DESIGN.md: /opd is in nm).
    const float scale = static_cast<float>(f.field.grid.wavelength / (2.0 * std::numbers::pi) * 1e9);
    for (std::size_t i = 0; i < n; ++i) p.opd.data()[i] = p.phase.data()[i] * scale;
  }
  if (height_)
    for (std::size_t i = 0; i < n; ++i) p.height.data()[i] = p.opd.data()[i] * height_per_nm_;
  if (compress_) {
    if (field_) sink_.compress_frame(h_field_, f.field.data.view(), p.packed[0]);
    if (amplitude_) sink_.compress_frame(h_amplitude_, p.amplitude.view(), p.packed[1]);
    if (phase_) sink_.compress_frame(h_phase_, p.phase.view(), p.packed[2]);
    if (opd_) sink_.compress_frame(h_opd_, p.opd.view(), p.packed[3]);
    if (height_) sink_.compress_frame(h_height_, p.height.view(), p.packed[4]);
  }
  if (preview) render_previews(f, p);
}

void OutputFile::render_previews(const FrameState& f, Products& p) const {
  char stem[64];
  std::snprintf(stem, sizeof stem, "frame%05lld_", static_cast<long long>(f.source_index));
  const double pitch = f.field.grid.dx;
  std::vector<std::string> made;
  // A z-stack previews its first plane.
  const std::size_t h = plan_.output.height, w = plan_.output.width;
  const std::string where = f.planes ? ", plane 1 of " + std::to_string(f.planes) : "";
  {
    render::PreviewOptions o;
    o.title = "amplitude, frame " + std::to_string(f.source_index) + ", z = " + format_length(f.field.grid.plane) + where;
    o.units = "a.u.";
    o.colormap = render::Colormap::viridis;
    o.pixel_pitch_m = pitch;
    const std::string path = (fs::path(preview_dir_) / (std::string(stem) + "amplitude.png")).string();
    render::write_preview(path, p.amplitude.view().sub(0, 0, h, w), o);
    made.push_back(path);
  }
  {
    render::PreviewOptions o;
    const bool wrapped = f.kind != Kind::phase;
    o.title = std::string(wrapped ? "wrapped phase" : "phase") + ", frame " + std::to_string(f.source_index) + where;
    o.units = "rad";
    o.colormap = wrapped ? render::Colormap::twilight : render::Colormap::viridis;
    if (wrapped) {
      o.range = std::make_pair(-std::numbers::pi, std::numbers::pi);
    }
    o.pixel_pitch_m = pitch;
    const std::string path = (fs::path(preview_dir_) / (std::string(stem) + "phase.png")).string();
    render::write_preview(path, p.phase.view().sub(0, 0, h, w), o);
    made.push_back(path);
  }
  for (const auto& st : pl_.stages) st->preview(f, preview_dir_, made);
  std::lock_guard lock(preview_mutex_);
  previews_.insert(previews_.end(), made.begin(), made.end());
}

void OutputFile::write(const FrameState& f, Products& p) {
  const std::size_t i = f.output_index;
  if (compress_) {
    if (field_) sink_.write_frame_compressed(h_field_, i, p.packed[0].data(), p.packed[0].size());
    if (amplitude_) sink_.write_frame_compressed(h_amplitude_, i, p.packed[1].data(), p.packed[1].size());
    if (phase_) sink_.write_frame_compressed(h_phase_, i, p.packed[2].data(), p.packed[2].size());
    if (opd_) sink_.write_frame_compressed(h_opd_, i, p.packed[3].data(), p.packed[3].size());
    if (height_) sink_.write_frame_compressed(h_height_, i, p.packed[4].data(), p.packed[4].size());
  } else {
    if (field_) sink_.write_frame(h_field_, i, f.field.data.view());
    if (amplitude_) sink_.write_frame(h_amplitude_, i, p.amplitude.view());
    if (phase_) sink_.write_frame(h_phase_, i, p.phase.view());
    if (opd_) sink_.write_frame(h_opd_, i, p.opd.view());
    if (height_) sink_.write_frame(h_height_, i, p.height.view());
  }
  for (std::size_t k = 0; k < h_records_.size(); ++k) {
    const auto& v = f.records[k];
    if (plan_.records[k].columns) sink_.write_row(h_records_[k], i, v.data(), v.size());
    else sink_.write_value(h_records_[k], i, v[0]);
  }
  // Table rows go to the journal, not to memory: a long run's tables can
  // outgrow it. finish() reads them back.
  for (std::size_t k = 0; k < table_values_.size(); ++k) {
    const std::size_t cols = plan_.tables[k].columns.size();
    const auto& rows = f.table_rows[k];
    row_scratch_.clear();
    for (std::size_t r = 0; r + cols <= rows.size(); r += cols) {
      row_scratch_.push_back(static_cast<double>(f.source_index));
      row_scratch_.insert(row_scratch_.end(), rows.begin() + static_cast<long>(r),
                          rows.begin() + static_cast<long>(r + cols));
    }
    journal_->add_rows(i, k, row_scratch_.data(), row_scratch_.size());
    table_values_[k] += row_scratch_.size();
  }
  for (const std::string& w : log::warnings_since(journaled_warnings_)) {
    journal_->add_warning(i, w);
    ++journaled_warnings_;
  }
  // With autofocus, /focus/distance is the focus found (DESIGN.md), NaN when
  // unsure; a z-stack has no single plane.
  const double nan = std::numeric_limits<double>::quiet_NaN();
  sink_.set_focus_distance(i, plan_.output.focus_available ? (f.focus_valid ? f.focus_plane : nan)
                              : f.planes                  ? nan
                                                          : f.field.grid.plane);
  sink_.mark_done(i, f.source_index);
  const auto now = std::chrono::steady_clock::now();
  if (now - last_checkpoint_ > std::chrono::milliseconds(250)) {
    sink_.checkpoint();
    last_checkpoint_ = now;
  }
}

namespace {

// CSV beside the HDF5 file, for spreadsheets and scripts that do not read
// HDF5; written under a temporary name and renamed like the HDF5 file.
class CsvTable {
public:
  CsvTable(std::string path, const TableSpec& t) : path_(std::move(path)), tmp_(path_ + ".partial"), t_(t) {
    f_ = std::fopen(tmp_.c_str(), "w");
    if (!f_) fail_output("cannot write the table: " + std::string(std::strerror(errno)), in_file(tmp_));
    std::fprintf(f_, "frame");
    for (std::size_t c = 0; c < t.columns.size(); ++c)
      std::fprintf(f_, ",%s%s%s%s", t.columns[c].c_str(), t.units[c].empty() || t.units[c] == "1" ? "" : " (",
                   t.units[c] == "1" ? "" : t.units[c].c_str(), t.units[c].empty() || t.units[c] == "1" ? "" : ")");
    std::fprintf(f_, "\n");
  }
  CsvTable(const CsvTable&) = delete;
  CsvTable& operator=(const CsvTable&) = delete;
  ~CsvTable() {
    if (f_) std::fclose(f_);
  }
  void rows(const double* values, std::size_t count) {
    const std::size_t cols = t_.columns.size() + 1;
    for (std::size_t r = 0; r + cols <= count; r += cols) {
      for (std::size_t c = 0; c < cols; ++c) {
        const double v = values[r + c];
        const bool integer = c == 0 || t_.integer[c - 1];
        if (integer) std::fprintf(f_, "%s%lld", c ? "," : "", static_cast<long long>(std::llround(v)));
        else std::fprintf(f_, "%s%.9g", c ? "," : "", v);
      }
      std::fprintf(f_, "\n");
    }
  }
  void finish() {
    const bool closed = std::fclose(f_) == 0;
    f_ = nullptr;
    if (!closed || std::rename(tmp_.c_str(), path_.c_str()) != 0)
      fail_output("cannot write the table: " + std::string(std::strerror(errno)), in_file(path_));
  }
  const std::string& path() const { return path_; }

private:
  std::string path_, tmp_;
  const TableSpec& t_;
  std::FILE* f_ = nullptr;
};

} // namespace

void OutputFile::finish() {
  // Tables: rows streamed back from the journal, in frame order, a batch at
  // a time, into the compound datasets and the CSV copies. The batch is
  // small and of fixed size, so finishing a long run takes no more memory
  // than a short one (tests/bench/run-long-run-check.sh).
  constexpr std::size_t batch_values = 4096;
  std::vector<io::FrameSink::Table> tables;
  std::vector<std::unique_ptr<CsvTable>> csv;
  std::vector<std::vector<double>> batch(plan_.tables.size());
  std::vector<std::size_t> next_row(plan_.tables.size(), 0);
  for (std::size_t k = 0; k < plan_.tables.size(); ++k) {
    const TableSpec& t = plan_.tables[k];
    std::vector<io::FrameSink::TableColumn> cols{{"frame", true, "1"}};
    for (std::size_t c = 0; c < t.columns.size(); ++c) cols.push_back({t.columns[c], t.integer[c], t.units[c]});
    tables.push_back(sink_.begin_table(t.name, cols, table_values_[k] / cols.size()));
    csv.push_back(std::make_unique<CsvTable>(table_csv_path(pl_.output.path, t.name), t));
    batch[k].reserve(batch_values);
  }
  auto flush = [&](std::size_t k) {
    const std::size_t cols = plan_.tables[k].columns.size() + 1, rows = batch[k].size() / cols;
    sink_.write_table_rows(tables[k], next_row[k], batch[k].data(), rows);
    csv[k]->rows(batch[k].data(), batch[k].size());
    next_row[k] += rows;
    batch[k].clear();
  };
  if (!plan_.tables.empty()) {
    RunJournal::read(pl_.output.path, [&](const RunJournal::Record& r) {
      if (!r.rows || r.table >= batch.size()) return;
      std::vector<double>& b = batch[r.table];
      if (!b.empty() && b.size() + r.count > batch_values) flush(r.table);
      b.insert(b.end(), r.values, r.values + r.count);
    });
    for (std::size_t k = 0; k < batch.size(); ++k) flush(k);
  }
  // The warnings of the frames done before a resume come from the journal.
  std::vector<std::string> warnings = resumed_warnings_;
  for (const auto& w : log::warnings())
    if (std::find(warnings.begin(), warnings.end(), w) == warnings.end()) warnings.push_back(w);
  if (const std::size_t more = log::warnings_dropped())
    warnings.push_back("... and " + std::to_string(more) + " more warnings, printed during the run but not kept here");
  if (!warnings.empty()) {
    std::string all;
    for (const auto& w : warnings) all += w + "\n";
    sink_.set_attribute("/", "warnings", all);
  }
  // The CSV copies first: the HDF5 file at its final name is the sign that
  // everything is complete (a kill before its rename is resumed).
  for (auto& c : csv) {
    c->finish();
    csv_written_.push_back(c->path());
  }
  sink_.finish();
  journal_->remove();
  finished_ = true;
}

std::vector<std::string> OutputFile::previews() const {
  std::lock_guard lock(preview_mutex_);
  return previews_;
}

} // namespace wavestack::pipeline
