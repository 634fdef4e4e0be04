#include "wavestack/pipeline/engine.hpp"

#include "output.hpp"
#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/core/units.hpp"
#include "wavestack/fft/fft.hpp"
#include "wavestack/io/frame_source.hpp"

#include <tbb/concurrent_queue.h>
#include <tbb/enumerable_thread_specific.h>
#include <tbb/global_control.h>
#include <tbb/info.h>
#include <tbb/parallel_pipeline.h>

#include <atomic>
#include <limits>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <numbers>
#include <unistd.h>

namespace fs = std::filesystem;

namespace wavestack::pipeline {
namespace {

/// A token: one frame's state plus its product buffers, reused for every
/// frame it carries.
struct Token {
  FrameState frame;
  Products products;
  std::vector<unsigned char> raw; ///< the frame as stored, converted in the parallel stage
};

/// PlanContext over the engine's probe frame. The probe is the first
/// selected frame; it is carried through each stage right after that stage
/// is planned, so stage k plans on what stage k-1 really produces.
class EngineContext final : public PlanContext {
public:
  EngineContext(const Instrument& ins, bool dry, FrameState* probe, const Image<float>* bg,
                const FrameState* bg_state)
      : ins_(ins), dry_(dry), probe_(probe), bg_(bg), bg_state_(bg_state) {}
  /// Plan the carrier search on the background hologram when there is one:
  /// without objects its strongest peak is the carrier itself.
  void set_probe(FrameState* probe) { probe_ = probe; }
  const Instrument& instrument() const override { return ins_; }
  bool dry_run() const override { return dry_; }
  const Image<float>& probe_hologram() override {
    if (dry_ || !probe_) fail_internal("a stage asked for data during a dry run");
    if (probe_->kind != Kind::hologram) fail_internal("the probe frame is no longer a hologram");
    return probe_->hologram;
  }
  const Image<float>* background() override { return bg_; }
  const FrameState* background_state() override { return dry_ ? nullptr : bg_state_; }

private:
  const Instrument& ins_;
  bool dry_;
  FrameState* probe_;
  const Image<float>* bg_;
  const FrameState* bg_state_;
};

/// Give a frame state one buffer per declared record and table.
void size_state(FrameState& f, const PlanSummary& s) {
  f.records.resize(s.records.size());
  for (std::size_t i = 0; i < s.records.size(); ++i)
    f.records[i].assign(std::max<std::size_t>(s.records[i].columns, 1), std::numeric_limits<double>::quiet_NaN());
  f.table_rows.resize(s.tables.size());
}

std::string shape_text(const Shape& s) {
  char buf[160];
  std::snprintf(buf, sizeof buf, "%s %zux%zu, pitch %s", std::string(kind_name(s.kind)).c_str(), s.height,
                s.width, format_length(s.grid.dx).c_str());
  return buf;
}

/// The wisdom file of this machine: plans measured once are reused by every
/// later run, which makes "measure" both fast to plan and reproducible.
std::string wisdom_path(const RunOptions& run) {
  if (run.fft_wisdom == "none") return {};
  if (run.fft_wisdom != "auto") return run.fft_wisdom;
  fs::path base;
  if (const char* x = std::getenv("XDG_CACHE_HOME"); x && *x) base = x;
  else if (const char* h = std::getenv("HOME"); h && *h) base = fs::path(h) / ".cache";
  else return {};
  char host[256] = "host";
  gethostname(host, sizeof host - 1);
  return (base / "wavestack" / ("fftw-wisdom-" + std::string(host))).string();
}

/// Shape, type and a checksum (FNV-1a) of the raw bytes of the first,
/// middle and last frame: tells the same input data from other data without
/// reading all of it, wherever the file was copied to.
std::string fingerprint(io::FrameSource& src) {
  std::vector<unsigned char> raw(src.raw_frame_bytes());
  std::uint64_t h = 14695981039346656037ull;
  const std::size_t n = src.count();
  for (std::size_t f : {std::size_t{0}, n / 2, n - 1}) {
    try {
      src.read_raw(f, raw.data());
    } catch (const Error&) {
      // A damaged frame outside the selection must not stop the run; the
      // fingerprint then says so, the same way every time.
      std::fill(raw.begin(), raw.end(), 0xff);
    }
    for (unsigned char b : raw) h = (h ^ b) * 1099511628211ull;
  }
  char buf[160];
  std::snprintf(buf, sizeof buf, "%zux%zux%zu %s fnv1a64=%016llx", n, src.height(), src.width(),
                std::string(src.dtype_name()).c_str(), static_cast<unsigned long long>(h));
  return buf;
}

} // namespace

struct Engine::Impl {
  Pipeline& pl;
  PlanSummary summary;
  bool planned = false;
  bool dry = false;
  std::unique_ptr<io::FrameSource> source;
  Image<float> background;
  bool has_background = false;

  explicit Impl(Pipeline& p) : pl(p) {}

  void load_background() {
    if (pl.input.background_path.empty()) return;
    io::FrameSource bg = io::FrameSource::open(pl.input.background_path, pl.input.background_dataset);
    if (bg.height() != source->height() || bg.width() != source->width()) {
      ErrorContext c;
      c.file = pl.input.background_path;
      c.dataset = pl.input.background_dataset;
      fail_input("background hologram is " + std::to_string(bg.height()) + "x" + std::to_string(bg.width()) +
                     " but the holograms in " + pl.input.path + " are " + std::to_string(source->height()) + "x" +
                     std::to_string(source->width()),
                 c);
    }
    // Average every background frame: the object-free reference gets less noisy.
    background.resize(bg.height(), bg.width());
    background.fill(0.0f);
    Image<float> tmp(bg.height(), bg.width());
    Image<double> acc(bg.height(), bg.width(), 0.0);
    for (std::size_t i = 0; i < bg.count(); ++i) {
      bg.read(i, tmp.view());
      for (std::size_t k = 0; k < tmp.size(); ++k) acc.data()[k] += tmp.data()[k];
    }
    for (std::size_t k = 0; k < tmp.size(); ++k)
      background.data()[k] = static_cast<float>(acc.data()[k] / static_cast<double>(bg.count()));
    has_background = true;
  }

  std::string wisdom;
  std::size_t plans_before = 0;

  void configure_fft() {
    // A dry run only needs shapes: no timing of FFTs.
    const bool measure = !dry && pl.run.fft_planning == "measure";
    fft::set_planning(measure ? fft::Planning::measure : fft::Planning::estimate);
    wisdom = measure ? wisdom_path(pl.run) : std::string();
    if (!wisdom.empty()) {
      try {
        fft::load_wisdom(wisdom);
      } catch (const Error& e) {
        log::warn("ignoring the FFT wisdom file: " + std::string(e.what()), "wisdom");
      }
    }
    plans_before = fft::cached_plans();
  }

  void keep_wisdom() {
    if (wisdom.empty() || fft::cached_plans() == plans_before) return;
    std::error_code ec;
    fs::create_directories(fs::path(wisdom).parent_path(), ec);
    try {
      fft::save_wisdom(wisdom);
    } catch (const Error& e) {
      log::warn("could not save the FFT wisdom file: " + std::string(e.what()), "wisdom");
    }
  }

  const PlanSummary& plan(bool dry_run, const std::string& frames_override) {
    dry = dry_run;
    configure_fft();
    source = std::make_unique<io::FrameSource>(io::FrameSource::open(pl.input.path, pl.input.dataset));
    summary = {};
    summary.source_frames = static_cast<std::int64_t>(source->count());
    summary.height = source->height();
    summary.width = source->width();
    summary.dtype = source->dtype_name();
    FrameRange range = frames_override.empty() ? pl.input.frames : FrameRange::parse(frames_override);
    const auto source_count = static_cast<std::int64_t>(source->count());
    ErrorContext in_dataset;
    in_dataset.file = pl.input.path;
    in_dataset.dataset = pl.input.dataset;
    const std::int64_t selected = range.size(source_count);
    if (selected == 0)
      fail_input("the frame selection \"" + range.str() + "\" selects no frame of the " +
                     std::to_string(source_count) + " in the dataset",
                 in_dataset);
    if (selected > max_run_frames)
      fail_input("the frame selection \"" + range.str() + "\" selects " + std::to_string(selected) +
                     " frames, more than one run takes (" + std::to_string(max_run_frames) +
                     "); run it in shards with --frames a:b and join them with 'wavestack merge'",
                 in_dataset);
    summary.frames = range.select(source_count);
    summary.selection = range.str();
    if (!dry) {
      load_background();
      summary.source_fingerprint = fingerprint(*source);
    }

    // Probes: the first frame of the pipeline file's own selection and, when
    // given, the background; both are carried through each stage right
    // after it is planned. Not the first frame of --frames: every shard of a
    // run must plan exactly as the whole run does.
    FrameState probe, probe_bg;
    if (!dry) {
      probe.source_index = pl.input.frames.size(source_count) > 0 ? pl.input.frames.start : summary.frames.front();
      probe.hologram.resize(source->height(), source->width());
      source->read(static_cast<std::size_t>(probe.source_index), probe.hologram.view());
      if (has_background) probe_bg.hologram = background;
    }
    EngineContext ctx(pl.instrument, dry, dry ? nullptr : has_background ? &probe_bg : &probe,
                      has_background ? &background : nullptr, has_background ? &probe_bg : nullptr);

    Shape shape;
    shape.kind = Kind::hologram;
    shape.height = source->height();
    shape.width = source->width();
    shape.grid = pl.instrument.grid();
    for (std::size_t i = 0; i < pl.stages.size(); ++i) {
      Stage& st = *pl.stages[i];
      ErrorContext where;
      where.file = pl.file;
      where.key = "stage " + std::to_string(i + 1) + " (" + std::string(st.type()) + ")";
      if (st.consumes() != shape.kind)
        fail_config("needs a " + std::string(kind_name(st.consumes())) + " as input, but the stage before it gives a " +
                        std::string(kind_name(shape.kind)) +
                        (st.consumes() == Kind::field && shape.kind == Kind::hologram
                             ? "; put a sideband stage before it"
                         : st.consumes() == Kind::phase ? "; put an unwrap stage before it"
                                                        : ""),
                    where);
      try {
        shape = st.plan(shape, ctx);
      } catch (const Error& e) {
        // Bad data found while planning is in the probe: the first selected frame.
        ErrorContext probe_at;
        const std::string& about = e.context().file;
        if (e.kind() == ErrorKind::input && !dry && !has_background && (about.empty() || about == pl.input.path)) {
          probe_at.dataset = pl.input.dataset;
          probe_at.frame = probe.source_index;
        }
        throw e.with(where).with(probe_at);
      }
      summary.shapes.push_back(shape);
      for (auto& [k, v] : st.notes()) summary.notes["stage" + std::to_string(i + 1) + "." + k] = v;
      st.record_base = summary.records.size();
      st.table_base = summary.tables.size();
      for (auto& r : st.records()) summary.records.push_back(r);
      for (auto& t : st.tables()) summary.tables.push_back(t);
      for (auto& c : st.constants()) summary.constants.push_back(c);
      size_state(probe, summary);
      size_state(probe_bg, summary);
      if (!dry) {
        auto ws = st.make_workspace();
        ErrorContext fc;
        fc.frame = probe.source_index;
        fc.dataset = pl.input.dataset;
        try {
          // The run processes this frame again and warns about it then
          // (or another shard does, when --frames leaves it out).
          const log::DroppedWarnings again_in_run;
          st.process(probe, ws.get());
        } catch (const Error& e) {
          throw e.with(fc);
        }
        probe.kind = st.produces();
        if (has_background) {
          probe_bg.source_index = -1;
          st.process(probe_bg, ws.get());
          probe_bg.kind = st.produces();
        }
      }
      log::debug(std::string(where.key) + " -> " + shape_text(shape));
    }
    if (shape.kind == Kind::hologram)
      fail_config("the pipeline ends with a hologram; add a sideband stage to reconstruct the field",
                  in_file(pl.file));
    summary.output = shape;
    keep_wisdom();
    planned = true;
    return summary;
  }

  RunReport run(const RunSettings& settings) {
    if (!planned || dry) fail_internal("run() needs a plan made with dry_run = false");
    const int threads = settings.threads > 0 ? settings.threads
                        : pl.run.threads > 0 ? pl.run.threads
                                             : tbb::info::default_concurrency();
    const int tokens = settings.tokens > 0 ? settings.tokens : pl.run.tokens > 0 ? pl.run.tokens : 2 * threads;
    tbb::global_control limit(tbb::global_control::max_allowed_parallelism, static_cast<std::size_t>(threads));

    // A failed run leaves OUT.partial for --resume (frame_sink.hpp): say so.
    auto kept = [&](const Error& e) {
      const std::string partial = io::FrameSink::partial_path(pl.output.path);
      std::error_code ec;
      if (!fs::exists(partial, ec)) return e;
      // A write that failed (disk full, I/O error) may have left the file
      // unreadable; --resume then starts over (README, Long batches).
      const char* caveat = e.kind() == ErrorKind::output ? " (if the failed write damaged it, --resume starts over)" : "";
      return Error(e.kind(), e.message() + "; the partial file " + partial + " is kept for --resume" + caveat,
                   e.context());
    };
    OutputFile out = [&] {
      try {
        return OutputFile(pl, summary, settings.resume);
      } catch (const Error& e) {
        if (e.kind() != ErrorKind::output) throw; // refusals say what to do themselves
        throw kept(e);
      }
    }();
    const std::size_t n = summary.frames.size();
    // Resumed: the frames already done are not written again. They are
    // carried through the stages without writing when a sequential stage
    // needs their state, or when they have a preview to draw.
    const std::size_t start = out.resume_from();
    bool carry_all = false;
    for (auto& st : pl.stages) carry_all = carry_all || st->sequential();
    std::vector<std::size_t> todo;
    todo.reserve(n);
    for (std::size_t i = 0; i < n; ++i)
      if (i >= start || carry_all || out.wants_preview(i)) todo.push_back(i);

    // Token pool: all frame buffers exist before the first frame moves.
    std::vector<std::unique_ptr<Token>> pool;
    tbb::concurrent_bounded_queue<Token*> free_tokens;
    for (int i = 0; i < tokens; ++i) {
      auto t = std::make_unique<Token>();
      t->frame.hologram.resize(summary.height, summary.width);
      t->raw.resize(source->raw_frame_bytes());
      size_state(t->frame, summary);
      out.size_products(t->products);
      free_tokens.push(t.get());
      pool.push_back(std::move(t));
    }
    // Per-thread workspaces, one per stage, made on first use by each thread.
    using Workspaces = std::vector<std::unique_ptr<StageWorkspace>>;
    tbb::enumerable_thread_specific<Workspaces> workspaces([&] {
      Workspaces w;
      for (auto& st : pl.stages) w.push_back(st->make_workspace());
      return w;
    });

    const bool progress = settings.progress;
    const auto t0 = std::chrono::steady_clock::now();
    std::size_t next = 0, written = 0;
    const std::size_t to_write = n - start;

    auto add_frame = [&](const Error& e, std::int64_t frame) {
      ErrorContext c;
      c.frame = frame;
      c.dataset = pl.input.dataset;
      return e.with(c);
    };

    // Filters: read (serial) -> runs of parallel stages, with each sequential
    // stage in a serial filter of its own -> products (parallel) -> write
    // (serial). The products and compression join the last parallel run.
    auto read = [&](tbb::flow_control& fc) -> Token* {
      if (next >= todo.size()) {
        fc.stop();
        return nullptr;
      }
      Token* t = nullptr;
      free_tokens.pop(t);
      FrameState& f = t->frame;
      f.output_index = todo[next];
      f.source_index = summary.frames[f.output_index];
      f.kind = Kind::hologram;
      f.planes = 0;
      f.distance = 0;
      f.focus = 0;
      f.focus_plane = 0;
      f.focus_valid = false;
      for (auto& r : f.table_rows) r.clear();
      for (auto& r : f.records) std::fill(r.begin(), r.end(), std::numeric_limits<double>::quiet_NaN());
      try {
        source->read_raw(static_cast<std::size_t>(f.source_index), t->raw.data());
      } catch (const Error& e) {
        throw add_frame(e, f.source_index);
      }
      ++next;
      return t;
    };
    auto run_stages = [&](std::size_t first, std::size_t last, bool convert, bool products) {
      return [&, first, last, convert, products](Token* t) -> Token* {
        Workspaces& ws = workspaces.local();
        try {
          if (convert) io::FrameSource::convert_raw(source->dtype(), t->raw.data(), t->frame.hologram.view());
          if (convert) source->check_frame(static_cast<std::size_t>(t->frame.source_index), t->frame.hologram.view());
          for (std::size_t i = first; i < last; ++i) {
            pl.stages[i]->process(t->frame, ws[i].get());
            t->frame.kind = pl.stages[i]->produces();
          }
          if (products) out.compute(t->frame, t->products);
        } catch (const Error& e) {
          throw add_frame(e, t->frame.source_index);
        }
        return t;
      };
    };
    auto write = [&](Token* t) {
      if (t->frame.output_index < start) { // done before the resume
        free_tokens.push(t);
        return;
      }
      try {
        out.write(t->frame, t->products);
      } catch (const Error& e) {
        throw add_frame(e, t->frame.source_index);
      }
      free_tokens.push(t);
      ++written;
      if (progress) {
        double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
        double fps = written / std::max(s, 1e-9);
        std::fprintf(stderr, "\r  %zu/%zu frames, %.1f frames/s, %.0f s left   ", start + written, n, fps,
                     (to_write - written) / std::max(fps, 1e-9));
        if (written == to_write) std::fprintf(stderr, "\n");
      }
    };

    tbb::filter<void, Token*> chain = tbb::make_filter<void, Token*>(tbb::filter_mode::serial_in_order, read);
    const std::size_t ns = pl.stages.size();
    std::size_t begin = 0;
    bool converted = false;
    for (std::size_t i = 0; i <= ns; ++i) {
      const bool seq = i < ns && pl.stages[i]->sequential();
      if (!seq && i < ns) continue;
      // Stages [begin, i) run in parallel; stage i (if any) alone, in order.
      if (i > begin || !converted || i == ns)
        chain = chain & tbb::make_filter<Token*, Token*>(tbb::filter_mode::parallel,
                                                         run_stages(begin, i, !converted, i == ns));
      converted = true;
      if (seq)
        chain = chain & tbb::make_filter<Token*, Token*>(tbb::filter_mode::serial_in_order,
                                                         run_stages(i, i + 1, false, false));
      begin = i + 1;
    }
    for (auto& st : pl.stages) st->reset();
    try {
      tbb::parallel_pipeline(static_cast<std::size_t>(tokens),
                             chain & tbb::make_filter<Token*, void>(tbb::filter_mode::serial_in_order, write));
      out.finish();
    } catch (const Error& e) {
      throw kept(e);
    }
    RunReport r;
    r.frames = written;
    r.resumed_at = start;
    r.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    r.output = pl.output.path;
    r.previews = out.previews();
    r.tables = out.csv_files();
    return r;
  }
};

Engine::Engine(Pipeline& pipeline) : impl_(std::make_unique<Impl>(pipeline)) {}
Engine::~Engine() = default;
const PlanSummary& Engine::plan(bool dry_run, const std::string& frames_override) {
  return impl_->plan(dry_run, frames_override);
}
RunReport Engine::run(const RunSettings& settings) { return impl_->run(settings); }

int report_error(const std::exception& e) {
  if (auto* w = dynamic_cast<const Error*>(&e)) {
    std::fprintf(stderr, "wavestack: error: %s\n", w->what());
    return w->exit_code();
  }
  if (dynamic_cast<const std::bad_alloc*>(&e)) {
    std::fprintf(stderr, "wavestack: error: out of memory; lower [run] frames_in_flight or --threads\n");
    return 1;
  }
  std::fprintf(stderr, "wavestack: error: %s\n", e.what());
  return 1;
}

} // namespace wavestack::pipeline
