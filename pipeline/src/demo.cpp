// `wavestack demo [DIR]`: write the demo holograms and run the demo pipeline.
#include "commands.hpp"
#include "demo_files.hpp"
#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/demo/generator.hpp"
#include "wavestack/pipeline/config.hpp"
#include "wavestack/pipeline/engine.hpp"

#include <chrono>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <unistd.h>

namespace fs = std::filesystem;

namespace wavestack::pipeline {
namespace {
void write_text(const fs::path& p, const std::string& text) {
  std::ofstream out(p, std::ios::binary);
  out << text;
  if (!out) fail_output("cannot write the file", in_file(p.string()));
}
} // namespace

int cmd_demo(const DemoArgs& a) {
  if (a.quiet) log::set_level(log::Level::warning);
  const fs::path dir = a.dir;
  std::error_code ec;
  fs::create_directories(dir, ec);
  if (ec) fail_output("cannot create the demo folder: " + ec.message(), in_file(dir.string()));

  // The pipeline file: datasets-demo/ already has one; elsewhere write the
  // embedded copy with the instrument profile beside it.
  const fs::path pipeline = dir / "demo-pipeline.toml";
  if (!fs::exists(pipeline)) {
    std::string text = embedded::demo_pipeline;
    const std::string ref = embedded::demo_profile_ref;
    const auto pos = text.find(ref);
    if (pos == std::string::npos) fail_internal("the embedded demo pipeline does not name its profile");
    text.replace(pos, ref.size(), "instrument.toml");
    write_text(dir / "instrument.toml", embedded::demo_profile);
    write_text(pipeline, text);
  }

  demo::DemoScenario scenario;
  scenario.frames = static_cast<std::size_t>(a.frames);
  scenario.height = scenario.width = static_cast<std::size_t>(a.size);
  const auto t0 = std::chrono::steady_clock::now();
  demo::DemoSummary s = demo::write_demo_data((dir / "data").string(), scenario);
  const double gen_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  if (!a.quiet) {
    std::printf("demo data (%.1f s):\n%s\n", gen_s, demo::describe(s).c_str());
  }

  Pipeline pl = load_pipeline(pipeline.string());
  Engine engine(pl);
  engine.plan(false);
  RunSettings rs;
  rs.progress = !a.quiet && isatty(fileno(stderr));
  RunReport r = engine.run(rs);
  if (!a.quiet) {
    std::printf("\nran %s\n", pipeline.string().c_str());
    std::printf("  %zu frames of %zux%zu in %.2f s: %.1f frames/s\n", r.frames, s.height, s.width, r.seconds,
                r.frames / std::max(r.seconds, 1e-9));
    std::printf("  wrote %s\n", r.output.c_str());
    for (const std::string& p : r.previews) std::printf("  preview %s\n", p.c_str());
    std::printf("\nlook at the previews, then read the data in Python:\n"
                "  import h5py; f = h5py.File(\"%s\"); f[\"phase\"][0], f[\"field\"][0]\n"
                "or list it: wavestack inspect %s\n",
                r.output.c_str(), r.output.c_str());
  }
  return 0;
}

} // namespace wavestack::pipeline
