// The wavestack command line (DESIGN.md "Command line", a contract).
#include "commands.hpp"
#include "wavestack/core/error.hpp"
#include "wavestack/pipeline/engine.hpp"
#include "wavestack/pipeline/registry.hpp"

#include <CLI/CLI.hpp>
#include <hdf5.h>

#include <csignal>
#include <cstdio>
#include <malloc.h>

using namespace wavestack;
using namespace wavestack::pipeline;

int main(int argc, char** argv) {
  // Frame-sized buffers (HDF5's chunk and conversion buffers) are allocated
  // and freed for every frame; above glibc's default mmap threshold each one
  // is a fresh mapping whose pages fault in again. Keeping them on the heap
  // saves ~8% of a run on 2048x2048 frames (tests/bench).
  mallopt(M_MMAP_THRESHOLD, 512 << 20);
  mallopt(M_TRIM_THRESHOLD, 1024 << 20);
  // Past a file size limit (ulimit -f) write() then fails with EFBIG and the
  // output error is reported, instead of the process dying by SIGXFSZ.
  std::signal(SIGXFSZ, SIG_IGN);
  // An output file whose close failed (disk full) stays open inside HDF5,
  // and HDF5's exit handler would crash closing it again; the .partial
  // file is left for --resume either way.
  H5dont_atexit();
  CLI::App app{"wavestack: from off-axis hologram stacks in HDF5 to refocused phase, OPD and field maps"};
  app.require_subcommand(1);
  std::string stage_help = "stage types:\n";
  for (const StageInfo& s : stage_registry())
    stage_help += "  " + std::string(s.type) + ": " + std::string(s.summary) + "\n      keys: " +
                  std::string(s.keys) + "\n";
  app.footer(stage_help + "\nexit status: 0 success, 2 bad command line or pipeline file, 3 bad input data, "
                          "4 output not written, 1 anything else");

  RunArgs run;
  auto* run_cmd = app.add_subcommand("run", "run a pipeline file over every selected frame");
  run_cmd->add_option("pipeline", run.pipeline, "pipeline file (TOML)")->required();
  run_cmd->add_option("-o,--output", run.output, "output HDF5 file (overrides [output] path)");
  run_cmd->add_option("--set", run.sets, "override a key, e.g. --set stage.3.distance=\"-5 um\"");
  run_cmd->add_option("--frames", run.frames, "frame selection start:stop[:step] (overrides [input] frames)");
  run_cmd->add_option("--threads", run.threads, "worker threads (default: all cores)")->check(CLI::Range(1, 1024));
  run_cmd->add_flag("--resume", run.resume, "continue a partial output left by a killed run");
  run_cmd->add_flag("-q,--quiet", run.quiet, "print only warnings and errors");

  RefocusArgs rf;
  auto* rf_cmd = app.add_subcommand("refocus", "reconstruct and refocus a hologram stack in one line, no pipeline file");
  rf_cmd->add_option("input", rf.input, "FILE.h5 or FILE.h5:/dataset (default dataset /holograms)")->required();
  rf_cmd->add_option("--profile", rf.profile, "instrument profile (TOML), e.g. calibration/demo-40x-0.75na.toml")
      ->required();
  rf_cmd->add_option("--distance", rf.distance, "one refocus distance, e.g. \"-8 um\"");
  rf_cmd->add_option("--planes", rf.planes, "a stack: FROM:TO:STEP (\"-20 um:20 um:1 um\") or a list (\"-5 um,0 um\")");
  rf_cmd->add_option("-o,--output", rf.output, "output HDF5 file (default: INPUT_refocused.h5)");
  rf_cmd->add_option("--background", rf.background, "object-free hologram FILE.h5[:/dataset]");
  rf_cmd->add_option("--frames", rf.frames, "frame selection start:stop[:step]");
  rf_cmd->add_option("--order", rf.order, "sideband order: auto, +1 or -1")->check(CLI::IsMember({"auto", "+1", "-1"}));
  rf_cmd->add_option("--method", rf.method, "auto, angular-spectrum, fresnel or fresnel-single-fft")
      ->check(CLI::IsMember({"auto", "angular-spectrum", "fresnel", "fresnel-single-fft"}));
  rf_cmd->add_option("--threads", rf.threads, "worker threads (default: all cores)")->check(CLI::Range(1, 1024));
  rf_cmd->add_flag("--print", rf.print, "print the equivalent pipeline file and stop");
  rf_cmd->add_flag("-q,--quiet", rf.quiet, "print only warnings and errors");

  MergeArgs merge;
  auto* merge_cmd = app.add_subcommand(
      "merge", "join the outputs of shards run with --frames into one file (virtual datasets, no frame copied)");
  merge_cmd->add_option("output", merge.output, "merged output file")->required();
  merge_cmd->add_option("shards", merge.shards, "shard output files, in any order")->required();
  merge_cmd->add_flag("--overwrite", merge.overwrite, "replace an existing merged file");
  merge_cmd->add_flag("-q,--quiet", merge.quiet, "print only warnings and errors");

  CheckArgs check;
  auto* check_cmd = app.add_subcommand("check", "validate a pipeline file and show the planned shapes; reads no frames");
  check_cmd->add_option("pipeline", check.pipeline, "pipeline file (TOML)")->required();
  check_cmd->add_option("--set", check.sets, "override a key as for run");

  std::string inspect_target;
  auto* inspect_cmd = app.add_subcommand("inspect", "show datasets, shapes, types and attributes of an HDF5 file");
  inspect_cmd->add_option("target", inspect_target, "FILE.h5 or FILE.h5:/dataset")->required();

  DemoArgs demo;
  auto* demo_cmd = app.add_subcommand("demo", "write the demo holograms and run the demo pipeline");
  demo_cmd->add_option("dir", demo.dir, "folder for the demo (default: ./wavestack-demo)");
  demo_cmd->add_option("--frames", demo.frames, "number of demo frames (default 16)")->check(CLI::PositiveNumber);
  demo_cmd->add_option("--size", demo.size, "frame side in pixels (default 1024)")->check(CLI::Range(64, 8192));
  demo_cmd->add_flag("-q,--quiet", demo.quiet, "print only warnings and errors");

  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    if (e.get_exit_code() == 0) return app.exit(e); // --help
    // One line like every other error (CLI11 would add a second one).
    std::string what = e.what();
    for (char& c : what)
      if (c == '\n') c = ' ';
    std::fprintf(stderr, "wavestack: error: %s (see wavestack --help)\n", what.c_str());
    return 2;
  }
  try {
    if (*run_cmd) return cmd_run(run);
    if (*check_cmd) return cmd_check(check);
    if (*merge_cmd) return cmd_merge(merge);
    if (*rf_cmd) return cmd_refocus(rf);
    if (*inspect_cmd) return cmd_inspect(inspect_target);
    if (*demo_cmd) return cmd_demo(demo);
  } catch (const std::exception& e) {
    return report_error(e);
  }
  return 1;
}
