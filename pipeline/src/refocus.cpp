// `wavestack refocus`: the common case in one line, without a pipeline file:
// reconstruct an off-axis hologram stack and refocus it to one distance or a
// stack of planes, with an instrument profile. It writes the equivalent
// pipeline text, runs it, and stores that text in the output like any run.
#include "commands.hpp"
#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/io/frame_source.hpp"
#include "wavestack/pipeline/config.hpp"
#include "wavestack/pipeline/engine.hpp"

#include <cstdio>
#include <filesystem>
#include <sstream>
#include <unistd.h>

namespace fs = std::filesystem;

namespace wavestack::pipeline {
namespace {
/// A TOML basic string with the characters TOML requires escaped.
std::string quote(const std::string& s) {
  std::string out = "\"";
  for (char c : s) {
    if (c == '"' || c == '\\') out += '\\';
    out += c;
  }
  return out + "\"";
}

/// "-20 um:20 um:1 um" (from:to:step) or "-5 um, 0 um, 5 um" (a list).
std::string planes_toml(const std::string& text) {
  std::vector<std::string> parts;
  const char sep = text.find(':') != std::string::npos ? ':' : ',';
  std::stringstream ss(text);
  for (std::string p; std::getline(ss, p, sep);) parts.push_back(p);
  if (sep == ':') {
    if (parts.size() != 3)
      fail_config("--planes expects FROM:TO:STEP such as \"-20 um:20 um:1 um\" or a list \"-5 um,0 um,5 um\", saw \"" +
                  text + "\"");
    return "distances = { from = " + quote(parts[0]) + ", to = " + quote(parts[1]) + ", step = " + quote(parts[2]) +
           " }";
  }
  std::string list = "distances = [";
  for (std::size_t i = 0; i < parts.size(); ++i) list += (i ? ", " : "") + quote(parts[i]);
  return list + "]";
}
} // namespace

std::string refocus_pipeline_text(const RefocusArgs& a) {
  const io::DatasetSpec in = io::split_dataset_spec(a.input);
  if (a.distance.empty() == a.planes.empty())
    fail_config("refocus needs exactly one of --distance (one plane) or --planes (a stack)");
  if (a.profile.empty()) fail_config("refocus needs --profile, the instrument profile (see calibration/)");
  std::ostringstream t;
  t << "# written by `wavestack refocus`\n[input]\npath = " << quote(fs::absolute(in.file).string()) << "\n";
  t << "dataset = " << quote(in.dataset.empty() ? "/holograms" : in.dataset) << "\n";
  if (!a.frames.empty()) t << "frames = " << quote(a.frames) << "\n";
  if (!a.background.empty()) {
    const io::DatasetSpec bg = io::split_dataset_spec(a.background);
    t << "background = " << quote(fs::absolute(bg.file).string() + (bg.dataset.empty() ? "" : ":" + bg.dataset))
      << "\n";
  }
  t << "\n[instrument]\nprofile = " << quote(fs::absolute(a.profile).string()) << "\n\n";
  t << "[[stage]]\ntype = \"fringe\"\n\n[[stage]]\ntype = \"sideband\"\norder = " << quote(a.order) << "\n\n";
  t << "[[stage]]\ntype = \"propagate\"\n";
  if (!a.distance.empty()) t << "distance = " << quote(a.distance) << "\n";
  else t << planes_toml(a.planes) << "\n";
  t << "method = " << quote(a.method) << "\n\n";
  std::string out = a.output;
  if (out.empty()) out = (fs::path(in.file).parent_path() / (fs::path(in.file).stem().string() + "_refocused.h5")).string();
  t << "[output]\npath = " << quote(fs::absolute(out).string()) << "\n";
  t << "products = [\"field\", \"amplitude\", \"phase\", \"opd\"]\n";
  return t.str();
}

int cmd_refocus(const RefocusArgs& a) {
  if (a.quiet) log::set_level(log::Level::warning);
  const std::string text = refocus_pipeline_text(a);
  if (a.print) {
    std::printf("%s", text.c_str());
    return 0;
  }
  Pipeline pl = load_pipeline_text(text, "wavestack refocus", fs::current_path().string());
  Engine engine(pl);
  const PlanSummary& s = engine.plan(false);
  RunSettings rs;
  rs.threads = a.threads;
  rs.progress = !a.quiet && isatty(fileno(stderr));
  RunReport r = engine.run(rs);
  if (!a.quiet) {
    for (const auto& [k, v] : s.notes) std::printf("  %s: %s\n", k.c_str(), v.c_str());
    std::printf("wrote %zu frames to %s in %.2f s (%.1f frames/s)\n", r.frames, r.output.c_str(), r.seconds,
                r.frames / std::max(r.seconds, 1e-9));
  }
  return 0;
}

} // namespace wavestack::pipeline
