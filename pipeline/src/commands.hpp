#pragma once
// The subcommands of the wavestack program, one function each.
#include <string>
#include <vector>

namespace wavestack::pipeline {

struct RunArgs {
  std::string pipeline, output, frames;
  std::vector<std::string> sets;
  int threads = 0;
  bool resume = false, quiet = false;
};
struct CheckArgs {
  std::string pipeline;
  std::vector<std::string> sets;
};
struct DemoArgs {
  std::string dir = "wavestack-demo";
  int frames = 16;
  int size = 1024;
  bool quiet = false;
};

struct RefocusArgs {
  std::string input, profile, distance, planes, output, background, frames;
  std::string order = "auto", method = "auto";
  int threads = 0;
  bool quiet = false, print = false;
};

struct MergeArgs {
  std::string output;
  std::vector<std::string> shards;
  bool overwrite = false, quiet = false;
};

int cmd_run(const RunArgs& a);
int cmd_merge(const MergeArgs& a);
int cmd_refocus(const RefocusArgs& a);
/// The pipeline text `refocus` runs (for --print and tests).
std::string refocus_pipeline_text(const RefocusArgs& a);
int cmd_check(const CheckArgs& a);
int cmd_inspect(const std::string& target);
int cmd_demo(const DemoArgs& a);

} // namespace wavestack::pipeline
