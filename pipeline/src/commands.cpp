#include "commands.hpp"
#include "journal.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/core/units.hpp"
#include "wavestack/pipeline/config.hpp"
#include "wavestack/pipeline/engine.hpp"
#include "wavestack/io/frame_sink.hpp"
#include "wavestack/io/hdf5.hpp"

#include <cstdio>
#include <filesystem>
#include <unistd.h>

namespace wavestack::pipeline {

std::vector<Override> overrides_of(const std::vector<std::string>& sets, const std::string& output) {
  std::vector<Override> o;
  for (const std::string& s : sets) o.push_back(Override::parse(s));
  if (!output.empty()) o.push_back({"output.path", output});
  return o;
}

namespace {
void print_plan(const Pipeline& pl, const PlanSummary& s) {
  std::printf("input   %s:%s  %lld frames of %zux%zu %s, %zu selected\n", pl.input.path.c_str(),
              pl.input.dataset.c_str(), static_cast<long long>(s.source_frames), s.height, s.width, s.dtype.c_str(),
              s.frames.size());
  const Instrument& ins = pl.instrument;
  std::printf("optics  wavelength %s, camera pitch %s, magnification %g, NA %g, medium index %g -> object pitch %s\n",
              format_length(ins.wavelength).c_str(), format_length(ins.pixel_pitch).c_str(), ins.magnification,
              ins.numerical_aperture, ins.medium_index, format_length(ins.object_pitch()).c_str());
  for (std::size_t i = 0; i < s.shapes.size(); ++i) {
    const Shape& sh = s.shapes[i];
    std::printf("stage %zu %-10s -> %s %zux%zu, pitch %s x %s, plane %s\n", i + 1, pl.stage_types[i].c_str(),
                std::string(kind_name(sh.kind)).c_str(), sh.height, sh.width, format_length(sh.grid.dy).c_str(),
                format_length(sh.grid.dx).c_str(), format_length(sh.grid.plane).c_str());
  }
  for (const auto& [k, v] : s.notes) std::printf("  %s: %s\n", k.c_str(), v.c_str());
  std::printf("output  %s\n", pl.output.path.c_str());
}
} // namespace

/// --resume after a kill that came once the output was renamed: the final
/// file is there, made by this very run, and there is no partial file.
bool already_complete(const Pipeline& pl, const PlanSummary& s) {
  std::error_code ec;
  if (std::filesystem::exists(io::FrameSink::partial_path(pl.output.path), ec) ||
      !std::filesystem::exists(pl.output.path, ec))
    return false;
  try {
    return io::read_string_attribute(pl.output.path, "/", "pipeline") == pl.text() &&
           io::read_string_attribute(pl.output.path, "/", "source_fingerprint") == s.source_fingerprint &&
           io::read_string_attribute(pl.output.path, "/", "frames_selected") == s.selection;
  } catch (const Error&) {
    return false; // not a result of this run: run it
  }
}

int cmd_check(const CheckArgs& a) {
  Pipeline pl = load_pipeline(a.pipeline, overrides_of(a.sets, ""));
  Engine engine(pl);
  const PlanSummary& s = engine.plan(true);
  print_plan(pl, s);
  std::printf("%s: ok\n", a.pipeline.c_str());
  return 0;
}

int cmd_run(const RunArgs& a) {
  if (a.quiet) log::set_level(log::Level::warning);
  Pipeline pl = load_pipeline(a.pipeline, overrides_of(a.sets, a.output));
  Engine engine(pl);
  const PlanSummary& s = engine.plan(false, a.frames);
  if (!a.quiet) print_plan(pl, s);
  if (a.resume && already_complete(pl, s)) {
    // killed between the final rename and removing the journal
    std::error_code ec;
    std::filesystem::remove(RunJournal::path_for(pl.output.path), ec);
    if (!a.quiet) std::printf("%s is already complete; nothing to resume\n", pl.output.path.c_str());
    return 0;
  }
  RunSettings rs;
  rs.threads = a.threads;
  rs.progress = !a.quiet && isatty(fileno(stderr));
  rs.resume = a.resume;
  RunReport r = engine.run(rs);
  if (!a.quiet) {
    if (r.resumed_at > 0) std::printf("resumed at frame %zu of %zu\n", r.resumed_at, s.frames.size());
    std::printf("wrote %zu frames to %s in %.2f s (%.1f frames/s)\n", r.frames, r.output.c_str(), r.seconds,
                r.frames / std::max(r.seconds, 1e-9));
    for (const std::string& p : r.previews) std::printf("preview %s\n", p.c_str());
    for (const std::string& p : r.tables) std::printf("table   %s\n", p.c_str());
  }
  return 0;
}

} // namespace wavestack::pipeline
