// `wavestack merge`: join the shard outputs of a run split with --frames.
#include "commands.hpp"
#include "output.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/io/shard_merge.hpp"

#include <cstdio>
#include <filesystem>
#include <fstream>
#include <string>

namespace fs = std::filesystem;

namespace wavestack::pipeline {
namespace {

/// The CSV copies of the tables, joined like the tables: the header of the
/// first shard, then every shard's rows in frame order.
std::vector<std::string> merge_csv(const io::MergeReport& r, const std::string& output) {
  std::vector<std::string> made;
  for (const std::string& set : r.copied_sets) {
    const std::string table = set.substr(set.find_first_not_of('/'));
    if (!fs::exists(table_csv_path(r.shards.front(), table))) continue; // not a table with a CSV
    const std::string path = table_csv_path(output, table), tmp = path + ".partial";
    std::ofstream out(tmp, std::ios::binary);
    bool header = true;
    for (const std::string& shard : r.shards) {
      std::ifstream in(table_csv_path(shard, table), std::ios::binary);
      if (!in) fail_input("the table copy " + table_csv_path(shard, table) + " of this shard is missing", in_file(shard));
      std::string line;
      bool first_line = true;
      while (std::getline(in, line)) {
        if (first_line && !header) {
          first_line = false;
          continue;
        }
        first_line = false;
        out << line << '\n';
      }
      header = false;
    }
    out.close();
    std::error_code ec;
    if (!out || (fs::rename(tmp, path, ec), ec)) fail_output("cannot write the table copy", in_file(path));
    made.push_back(path);
  }
  return made;
}

} // namespace

int cmd_merge(const MergeArgs& a) {
  if (fs::exists(a.output) && !a.overwrite)
    fail_output("the merged file exists already; remove it or give --overwrite", in_file(a.output));
  const io::MergeReport r = io::merge_shards(a.shards, a.output);
  const std::vector<std::string> csv = merge_csv(r, a.output);
  if (!a.quiet) {
    std::printf("merged %zu shard%s, %zu frames (source frames %lld to %lld, step %lld) into %s\n", r.shards.size(),
                r.shards.size() == 1 ? "" : "s", r.frames, static_cast<long long>(r.first), static_cast<long long>(r.last),
                static_cast<long long>(r.step), a.output.c_str());
    std::printf("  %zu datasets read from the shards in place, %zu copied\n", r.virtual_sets.size(),
                r.copied_sets.size());
    for (const auto& p : csv) std::printf("table   %s\n", p.c_str());
    std::printf("keep the shard files beside %s: its frames stay in them\n", a.output.c_str());
  }
  return 0;
}

} // namespace wavestack::pipeline
