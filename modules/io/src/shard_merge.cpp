#include "wavestack/io/shard_merge.hpp"

#include "hdf5_util.hpp"

#include <algorithm>
#include <cstring>
#include <ctime>
#include <filesystem>
#include <limits>

namespace wavestack::io {

using namespace detail;
namespace fs = std::filesystem;

namespace {

struct Shard {
  std::string path;
  Hid file;
  std::string pipeline, fingerprint, frame_list, warnings;
  std::vector<std::int64_t> index;
};

std::string text_attribute(hid_t object, const std::string& name) {
  for (const auto& a : read_all_attributes(object))
    if (a.name == name) return a.value;
  return {};
}

std::vector<std::string> lines_of(const std::string& text) {
  std::vector<std::string> out;
  std::size_t from = 0;
  while (from < text.size()) {
    const std::size_t to = std::min(text.find('\n', from), text.size());
    if (to > from) out.push_back(text.substr(from, to - from));
    from = to + 1;
  }
  return out;
}

/// A dataset's type and shape, opened by path.
struct Dset {
  Hid id, type, space;
  std::vector<std::uint64_t> shape;
};

Dset open_dataset(const Shard& s, const std::string& name) {
  const ErrorContext c = where(s.path, name);
  if (path_kind(s.file.get(), name) != PathKind::dataset)
    fail_input("this shard has no dataset " + name + ", unlike the first shard", c);
  Dset d;
  d.id = dataset_hid(H5Dopen2(s.file.get(), name.c_str(), H5P_DEFAULT));
  if (d.id) d.type = type_hid(H5Dget_type(d.id.get()));
  if (d.id) d.space = space_hid(H5Dget_space(d.id.get()));
  if (!d.id || !d.type || !d.space) fail_hdf5(ErrorKind::input, "cannot open " + name, c);
  d.shape = space_shape(d.space.get());
  return d;
}

std::vector<unsigned char> read_all(const Dset& d, const ErrorContext& c) {
  std::size_t count = 1;
  for (auto n : d.shape) count *= static_cast<std::size_t>(n);
  std::vector<unsigned char> buf(count * H5Tget_size(d.type.get()));
  if (count && H5Dread(d.id.get(), d.type.get(), H5S_ALL, H5S_ALL, H5P_DEFAULT, buf.data()) < 0)
    fail_hdf5(ErrorKind::input, "cannot read the dataset", c);
  return buf;
}

Shard open_shard(const std::string& path) {
  const ErrorContext c = where(path);
  if (path.ends_with(".partial"))
    fail_input("this shard is an unfinished output; complete it with `wavestack run ... --resume` first", c);
  Shard s;
  s.path = path;
  s.file = open_for_reading(path);
  if (text_attribute(s.file.get(), "format") != "wavestack" || text_attribute(s.file.get(), "format_version") != "1")
    fail_input("this is not a wavestack format_version 1 output file", c);
  s.pipeline = text_attribute(s.file.get(), "pipeline");
  s.fingerprint = text_attribute(s.file.get(), "source_fingerprint");
  s.frame_list = text_attribute(s.file.get(), "frame_datasets");
  s.warnings = text_attribute(s.file.get(), "warnings");
  if (s.frame_list.empty())
    fail_input("this file does not list its per-frame datasets (frame_datasets); it was written by an older "
               "wavestack and cannot be merged",
               c);
  const Dset index = open_dataset(s, "/frames/index");
  const Dset done = open_dataset(s, "/frames/done");
  if (index.shape.size() != 1 || done.shape != index.shape || index.shape[0] == 0)
    fail_input("/frames/index and /frames/done do not describe the same frames", c);
  s.index.resize(index.shape[0]);
  std::vector<std::uint8_t> flags(done.shape[0]);
  if (H5Dread(index.id.get(), H5T_NATIVE_INT64, H5S_ALL, H5S_ALL, H5P_DEFAULT, s.index.data()) < 0 ||
      H5Dread(done.id.get(), H5T_NATIVE_UINT8, H5S_ALL, H5S_ALL, H5P_DEFAULT, flags.data()) < 0)
    fail_hdf5(ErrorKind::input, "cannot read /frames", c);
  for (std::size_t i = 0; i < flags.size(); ++i)
    if (!flags[i])
      fail_input("output frame " + std::to_string(i) + " of this shard is not done; complete it with --resume first",
                 c);
  return s;
}

/// Copy every attribute of `from` to `to` except those named in `skip`.
void copy_attributes(hid_t from, hid_t to, const std::vector<std::string>& skip, const ErrorContext& c) {
  const int count = H5Aget_num_attrs(from);
  for (int k = 0; k < count; ++k) {
    Hid a = attr_hid(H5Aopen_by_idx(from, ".", H5_INDEX_NAME, H5_ITER_INC, static_cast<hsize_t>(k), H5P_DEFAULT,
                                    H5P_DEFAULT));
    if (!a) fail_hdf5(ErrorKind::input, "cannot read an attribute", c);
    char name[512] = {0};
    H5Aget_name(a.get(), sizeof name - 1, name);
    if (std::find(skip.begin(), skip.end(), name) != skip.end()) continue;
    Hid type = type_hid(H5Aget_type(a.get()));
    Hid space = space_hid(H5Aget_space(a.get()));
    const hssize_t n = space ? H5Sget_simple_extent_npoints(space.get()) : -1;
    if (!type || n < 0) fail_hdf5(ErrorKind::input, std::string("cannot read the attribute ") + name, c);
    std::vector<unsigned char> buf(std::max<std::size_t>(1, static_cast<std::size_t>(n)) * H5Tget_size(type.get()));
    const bool variable = H5Tis_variable_str(type.get()) > 0 || H5Tdetect_class(type.get(), H5T_VLEN) > 0;
    if (H5Aread(a.get(), type.get(), buf.data()) < 0)
      fail_hdf5(ErrorKind::input, std::string("cannot read the attribute ") + name, c);
    Hid out = attr_hid(H5Acreate2(to, name, type.get(), space.get(), H5P_DEFAULT, H5P_DEFAULT));
    const bool ok = out && H5Awrite(out.get(), type.get(), buf.data()) >= 0;
    if (variable) H5Dvlen_reclaim(type.get(), space.get(), H5P_DEFAULT, buf.data());
    if (!ok) fail_hdf5(ErrorKind::output, std::string("cannot write the attribute ") + name, c);
  }
}

/// Where the merged file finds a shard: relative to its own folder when the
/// shard is inside it (the pair can then be moved together), else absolute.
std::string source_name(const std::string& shard, const std::string& output) {
  const fs::path s = fs::absolute(shard).lexically_normal();
  const fs::path folder = fs::absolute(output).parent_path().lexically_normal();
  const fs::path rel = s.lexically_relative(folder);
  if (!rel.empty() && *rel.begin() != "..") return rel.string();
  return s.string();
}

/// A pipeline text (as wavestack prints it: one "key = value" per line) with
/// the [output] path line replaced by `line`, or removed when `line` is
/// empty: shards of one run differ only there.
std::string replace_output_path(const std::string& text, const std::string& line) {
  std::string out;
  bool in_output = false;
  std::size_t from = 0;
  while (from < text.size()) {
    const std::size_t to = std::min(text.find('\n', from), text.size());
    const std::string l = text.substr(from, to - from);
    if (!l.empty() && l[0] == '[') in_output = l == "[output]";
    if (in_output && l.starts_with("path =")) {
      if (!line.empty()) out.append(line).append("\n");
    } else {
      out.append(l).append(to < text.size() ? "\n" : "");
    }
    from = to + 1;
  }
  return out;
}

std::string toml_string(const std::string& v) {
  std::string q = "\"";
  for (char ch : v) {
    if (ch == '"' || ch == '\\') q.push_back('\\');
    q.push_back(ch);
  }
  return q + "\"";
}

void check_sequence(std::vector<Shard>& shards, MergeReport& r) {
  std::sort(shards.begin(), shards.end(), [](const Shard& a, const Shard& b) { return a.index[0] < b.index[0]; });
  r.step = 0;
  for (const Shard& s : shards)
    if (s.index.size() > 1) {
      r.step = s.index[1] - s.index[0];
      break;
    }
  if (r.step <= 0) r.step = 1;
  for (std::size_t k = 0; k < shards.size(); ++k) {
    const Shard& s = shards[k];
    for (std::size_t i = 1; i < s.index.size(); ++i)
      if (s.index[i] - s.index[i - 1] != r.step)
        fail_input("the source frames of this shard do not follow one step of " + std::to_string(r.step) +
                       " (frame " + std::to_string(s.index[i - 1]) + " is followed by " + std::to_string(s.index[i]) +
                       ")",
                   where(s.path));
    if (k == 0) continue;
    const Shard& p = shards[k - 1];
    const std::int64_t last = p.index.back(), first = s.index.front();
    if (first <= last)
      fail_input("shards overlap: " + p.path + " has source frames " + std::to_string(p.index.front()) + "-" +
                     std::to_string(last) + " and " + s.path + " starts at frame " + std::to_string(first),
                 where(s.path));
    if (first - last != r.step)
      fail_input("the shards leave a gap: no shard has the source frames after " + std::to_string(last) + " (end of " +
                     p.path + ") and before " + std::to_string(first) + " (start of " + s.path + ")",
                 where(s.path));
  }
  r.first = shards.front().index.front();
  r.last = shards.back().index.back();
}

} // namespace

MergeReport merge_shards(const std::vector<std::string>& paths, const std::string& output) {
  if (paths.empty()) fail_input("merge needs at least one shard", where(output));
  Lock lock;
  MergeReport r;
  std::vector<Shard> shards;
  for (const std::string& p : paths) {
    std::error_code ec;
    if (fs::equivalent(p, output, ec))
      fail_input("the merged output would overwrite this shard; choose another output path", where(p));
    shards.push_back(open_shard(p));
  }
  const Shard& ref = shards.front();
  for (const Shard& s : shards) {
    if (replace_output_path(s.pipeline, "") != replace_output_path(ref.pipeline, ""))
      fail_input("this shard was made with another pipeline than " + ref.path + "; only shards of one run merge",
                 where(s.path));
    if (s.fingerprint != ref.fingerprint)
      fail_input("this shard was made from other input data than " + ref.path + " (" + s.fingerprint + " vs " +
                     ref.fingerprint + ")",
                 where(s.path));
    if (s.frame_list != ref.frame_list)
      fail_input("this shard has other per-frame datasets than " + ref.path, where(s.path));
  }
  check_sequence(shards, r);
  std::vector<std::size_t> offset;
  for (const Shard& s : shards) {
    offset.push_back(r.frames);
    r.frames += s.index.size();
    r.shards.push_back(s.path);
  }

  const std::vector<std::string> per_frame = lines_of(ref.frame_list);
  const Shard& first = shards.front();
  const std::vector<DatasetInfo> sets = list_datasets(first.file.get(), std::numeric_limits<std::size_t>::max());
  for (const Shard& s : shards) {
    const auto other = list_datasets(s.file.get(), std::numeric_limits<std::size_t>::max());
    if (other.size() != sets.size()) fail_input("this shard has other datasets than " + first.path, where(s.path));
  }

  const std::string partial = output + ".partial";
  const ErrorContext oc = where(partial);
  {
    std::error_code ec;
    const fs::path parent = fs::path(output).parent_path();
    if (!parent.empty() && !fs::is_directory(parent, ec))
      fail_output("cannot write the merged file: the folder '" + parent.string() + "' does not exist", where(output));
  }
  Hid fapl = file_access(true);
  Hid out = file_hid(H5Fcreate(partial.c_str(), H5F_ACC_TRUNC, H5P_DEFAULT, fapl.get()));
  if (!out) fail_hdf5(ErrorKind::output, "cannot create the merged file", oc);

  // Root: the run's attributes, with what the merge changes.
  {
    Hid from_root = object_hid(H5Oopen(first.file.get(), "/", H5P_DEFAULT));
    Hid to_root = object_hid(H5Oopen(out.get(), "/", H5P_DEFAULT));
    if (!from_root || !to_root) fail_hdf5(ErrorKind::output, "cannot open the root groups", oc);
    copy_attributes(from_root.get(), to_root.get(), {"created", "frames_selected", "warnings", "pipeline"},
                    where(first.path, "/"));
  }
  write_attribute(out.get(), "created", iso8601_utc_now(), ErrorKind::output, oc);
  write_attribute(out.get(), "pipeline", replace_output_path(first.pipeline, "path = " + toml_string(output)),
                  ErrorKind::output, oc);
  std::string sel = std::to_string(r.first) + ":" + std::to_string(r.last + 1);
  if (r.step != 1) sel.append(":").append(std::to_string(r.step));
  write_attribute(out.get(), "frames_selected", sel, ErrorKind::output, oc);
  std::string from, warnings;
  std::vector<std::string> seen;
  for (const Shard& s : shards) {
    from.append(from.empty() ? "" : "\n").append(source_name(s.path, output));
    for (const auto& w : lines_of(s.warnings))
      if (std::find(seen.begin(), seen.end(), w) == seen.end()) {
        seen.push_back(w);
        warnings.append(w).append("\n");
      }
  }
  write_attribute(out.get(), "merged_from", from, ErrorKind::output, oc);
  if (!warnings.empty()) write_attribute(out.get(), "warnings", warnings, ErrorKind::output, oc);

  for (const DatasetInfo& info : sets) {
    const std::string& name = info.path;
    const ErrorContext c = where(partial, name);
    create_parent_groups(out.get(), name, ErrorKind::output, c);
    const Dset d0 = open_dataset(first, name);
    const bool frames = std::find(per_frame.begin(), per_frame.end(), name) != per_frame.end();
    const bool table = !frames && H5Tget_class(d0.type.get()) == H5T_COMPOUND && d0.shape.size() == 1;
    Hid dset;
    if (frames) {
      // One virtual dataset: shard k's frames are rows offset[k].. of it.
      std::vector<hsize_t> dims(d0.shape.begin(), d0.shape.end());
      dims[0] = r.frames;
      Hid vspace = space_hid(H5Screate_simple(static_cast<int>(dims.size()), dims.data(), nullptr));
      Hid dcpl = plist_hid(H5Pcreate(H5P_DATASET_CREATE));
      Hid src_dcpl = plist_hid(H5Dget_create_plist(d0.id.get()));
      if (!vspace || !dcpl || !src_dcpl) fail_hdf5(ErrorKind::output, "cannot prepare the virtual dataset", c);
      H5D_fill_value_t defined = H5D_FILL_VALUE_UNDEFINED;
      if (H5Pfill_value_defined(src_dcpl.get(), &defined) >= 0 && defined == H5D_FILL_VALUE_USER_DEFINED) {
        std::vector<unsigned char> fill(H5Tget_size(d0.type.get()));
        if (H5Pget_fill_value(src_dcpl.get(), d0.type.get(), fill.data()) >= 0)
          H5Pset_fill_value(dcpl.get(), d0.type.get(), fill.data());
      }
      for (std::size_t k = 0; k < shards.size(); ++k) {
        const Dset dk = open_dataset(shards[k], name);
        std::vector<std::uint64_t> expect = d0.shape;
        expect[0] = shards[k].index.size();
        if (dk.shape != expect || H5Tequal(dk.type.get(), d0.type.get()) <= 0)
          fail_input("the dataset " + name + " of this shard has another type or frame shape than in " + first.path,
                     where(shards[k].path, name));
        std::vector<hsize_t> start(dims.size(), 0), count(dims.begin(), dims.end());
        start[0] = offset[k];
        count[0] = shards[k].index.size();
        if (H5Sselect_hyperslab(vspace.get(), H5S_SELECT_SET, start.data(), nullptr, count.data(), nullptr) < 0 ||
            H5Pset_virtual(dcpl.get(), vspace.get(), source_name(shards[k].path, output).c_str(), name.c_str(),
                           dk.space.get()) < 0)
          fail_hdf5(ErrorKind::output, "cannot map " + shards[k].path + " into the virtual dataset", c);
      }
      H5Sselect_all(vspace.get());
      dset = dataset_hid(
          H5Dcreate2(out.get(), name.c_str(), d0.type.get(), vspace.get(), H5P_DEFAULT, dcpl.get(), H5P_DEFAULT));
      if (!dset) fail_hdf5(ErrorKind::output, "cannot create the virtual dataset", c);
      r.virtual_sets.push_back(name);
    } else if (table) {
      // Rows of all shards, in frame order (each row names its frame).
      std::vector<unsigned char> rows;
      hsize_t total = 0;
      for (const Shard& s : shards) {
        const Dset dk = open_dataset(s, name);
        if (H5Tequal(dk.type.get(), d0.type.get()) <= 0 || dk.shape.size() != 1)
          fail_input("the table " + name + " of this shard has other columns than in " + first.path,
                     where(s.path, name));
        const auto bytes = read_all(dk, where(s.path, name));
        rows.insert(rows.end(), bytes.begin(), bytes.end());
        total += dk.shape[0];
      }
      Hid space = space_hid(H5Screate_simple(1, &total, nullptr));
      dset = dataset_hid(
          H5Dcreate2(out.get(), name.c_str(), d0.type.get(), space.get(), H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT));
      if (!space || !dset || (total && H5Dwrite(dset.get(), d0.type.get(), H5S_ALL, H5S_ALL, H5P_DEFAULT,
                                                rows.data()) < 0))
        fail_hdf5(ErrorKind::output, "cannot write the table", c);
      r.copied_sets.push_back(name);
    } else {
      // Known once per run: the same in every shard, copied once.
      const auto bytes = read_all(d0, where(first.path, name));
      for (const Shard& s : shards) {
        const Dset dk = open_dataset(s, name);
        if (dk.shape != d0.shape || H5Tequal(dk.type.get(), d0.type.get()) <= 0 ||
            read_all(dk, where(s.path, name)) != bytes)
          fail_input("the dataset " + name + " differs between this shard and " + first.path +
                         "; shards of one run have the same values there",
                     where(s.path, name));
      }
      dset = dataset_hid(H5Dcreate2(out.get(), name.c_str(), d0.type.get(), d0.space.get(), H5P_DEFAULT,
                                    H5P_DEFAULT, H5P_DEFAULT));
      if (!dset || (!bytes.empty() &&
                    H5Dwrite(dset.get(), d0.type.get(), H5S_ALL, H5S_ALL, H5P_DEFAULT, bytes.data()) < 0))
        fail_hdf5(ErrorKind::output, "cannot write the dataset", c);
      r.copied_sets.push_back(name);
    }
    copy_attributes(d0.id.get(), dset.get(), {}, where(first.path, name));
  }
  const bool flushed = H5Fflush(out.get(), H5F_SCOPE_GLOBAL) >= 0;
  if (!out.close() || !flushed) fail_hdf5(ErrorKind::output, "cannot finish the merged file", oc);
  std::error_code ec;
  fs::rename(partial, output, ec);
  if (ec) fail_output("cannot rename the merged file to its final name: " + ec.message(), where(partial));
  return r;
}

} // namespace wavestack::io
