#include "wavestack/pipeline/config.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/core/units.hpp"
#include "wavestack/pipeline/params.hpp"
#include "wavestack/pipeline/registry.hpp"

#include <charconv>
#include <cstdlib>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <limits>
#include <sstream>
#include <utility>

namespace fs = std::filesystem;

namespace wavestack::pipeline {
namespace {

std::optional<std::int64_t> parse_int(std::string_view s) {
  if (s.empty()) return std::nullopt;
  std::int64_t v = 0;
  auto [p, ec] = std::from_chars(s.data(), s.data() + s.size(), v);
  if (ec != std::errc() || p != s.data() + s.size()) return std::nullopt;
  return v;
}

std::string resolve(const std::string& folder, const std::string& path) {
  // Normal form either way: "new/../raw.h5" must be seen as raw.h5 even
  // before the folder "new" exists (raw data is never overwritten).
  if (path.empty()) return path;
  if (fs::path(path).is_absolute()) return fs::path(path).lexically_normal().string();
  return (fs::path(folder) / path).lexically_normal().string();
}

std::string read_file(const std::string& path, ErrorKind kind) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw Error(kind, "cannot read file: " + std::string(std::strerror(errno)), in_file(path));
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

toml::table parse_toml(const std::string& text, const std::string& file) {
  try {
    return toml::parse(text, file);
  } catch (const toml::parse_error& e) {
    ErrorContext c;
    c.file = file;
    c.line = static_cast<int>(e.source().begin.line);
    c.column = static_cast<int>(e.source().begin.column);
    throw Error(ErrorKind::config, "not valid TOML: " + std::string(e.description()), c);
  }
}

// "a.b.c" with 1-based numbers selecting [[stage]] entries.
void apply_override(toml::table& root, const Override& o) {
  std::vector<std::string> parts;
  std::stringstream ss(o.key);
  for (std::string p; std::getline(ss, p, '.');) parts.push_back(p);
  ErrorContext ctx;
  ctx.key = "--set " + o.key;
  if (parts.size() < 2) fail_config("expected KEY=VALUE with a dotted key such as output.path", ctx);
  toml::table* t = &root;
  for (std::size_t i = 0; i + 1 < parts.size(); ++i) {
    const std::string& p = parts[i];
    if (p == "stage") {
      auto n = i + 1 < parts.size() - 1 ? parse_int(parts[i + 1]) : std::nullopt;
      toml::array* stages = root["stage"].as_array();
      if (!n || !stages || *n < 1 || static_cast<std::size_t>(*n) > stages->size())
        fail_config("expected stage.N.key with N from 1 to " + std::to_string(stages ? stages->size() : 0), ctx);
      t = (*stages)[static_cast<std::size_t>(*n - 1)].as_table();
      if (!t) fail_config("stage " + parts[i + 1] + " is not a [[stage]] table", ctx);
      ++i;
      continue;
    }
    toml::node* n = t->get(p);
    if (!n) n = &t->insert_or_assign(p, toml::table{}).first->second;
    t = n->as_table();
    if (!t) fail_config("\"" + p + "\" is not a table", ctx);
  }
  // The value is TOML when it parses as such ("3", "true", "[\"phase\"]"),
  // otherwise a plain string (paths, lengths).
  toml::table parsed;
  try {
    parsed = toml::parse("v = " + o.value, std::string_view("--set"));
  } catch (const toml::parse_error&) {
    parsed.insert_or_assign("v", o.value);
  }
  t->insert_or_assign(parts.back(), *parsed.get("v"));
}

void check_plausible(Params& p, std::string_view key, double v, double lo, double hi, const char* typical) {
  if (!(v > 0)) p.fail(key, "must be positive, saw " + format_length(v));
  if (v < lo || v > hi) {
    // A value off by 10^3 or 10^6 is almost always a unit mistake.
    std::string hint;
    for (double f : {1e-9, 1e-6, 1e-3, 1e3, 1e6, 1e9}) {
      double w = v * f;
      if (w >= lo && w <= hi) {
        hint = "; did you mean " + format_length(w) + "?";
        break;
      }
    }
    p.fail(key, "implausible value " + format_length(v) + " (expected " + typical + ")" + hint);
  }
}

/// A bare number where a length belongs: name the unit that makes it
/// plausible (wavelength = 532 -> "532 nm"), not just any unit.
void refuse_bare_length(Params& p, std::string_view key, double lo, double hi) {
  const toml::node* n = p.has(key) ? p.node(key) : nullptr;
  if (!n || !n->is_number()) return;
  const double v = n->value<double>().value_or(0.0);
  static constexpr std::pair<const char*, double> units[] = {{"nm", 1e-9}, {"um", 1e-6}, {"mm", 1e-3}, {"m", 1.0}};
  for (auto [unit, scale] : units) {
    if (v * scale >= lo && v * scale <= hi) {
      std::ostringstream s;
      s << "expected a length with a unit such as \"" << v << " " << unit << "\", saw the bare number " << v;
      p.fail(key, s.str());
    }
  }
}

Instrument read_instrument(Params& p) {
  Instrument ins;
  refuse_bare_length(p, "wavelength", 100e-9, 20e-6);
  refuse_bare_length(p, "pixel_pitch", 0.1e-6, 1e-3);
  auto wl = p.length("wavelength");
  auto pitch = p.length("pixel_pitch");
  auto mag = p.number("magnification");
  if (!wl) p.fail("wavelength", "missing: give the vacuum wavelength, e.g. wavelength = \"632.8 nm\"");
  if (!pitch) p.fail("pixel_pitch", "missing: give the camera pixel pitch, e.g. pixel_pitch = \"3.45 um\"");
  if (!mag) p.fail("magnification", "missing: give the lateral magnification (1.0 for lensless set-ups)");
  check_plausible(p, "wavelength", *wl, 100e-9, 20e-6, "100 nm to 20 um");
  check_plausible(p, "pixel_pitch", *pitch, 0.1e-6, 1e-3, "0.1 um to 1 mm");
  if (!(*mag > 0) || !std::isfinite(*mag)) p.fail("magnification", "must be a positive number");
  ins.wavelength = *wl;
  ins.pixel_pitch = *pitch;
  ins.magnification = *mag;
  ins.medium_index = p.number("medium_index", 1.0);
  if (!(ins.medium_index >= 1.0 && ins.medium_index < 4.0))
    p.fail("medium_index", "expected a refractive index from 1 to 4");
  ins.numerical_aperture = p.number("numerical_aperture", 0.0);
  if (ins.numerical_aperture < 0 || ins.numerical_aperture >= ins.medium_index)
    p.fail("numerical_aperture", "expected 0 < NA < medium_index");
  if (auto c = p.table("carrier")) {
    auto fx = c->number("fx");
    auto fy = c->number("fy");
    if (!fx || !fy) c->fail("fx", "carrier needs fx and fy in cycles per um (object space)");
    ins.carrier = std::make_pair(*fy * 1e6, *fx * 1e6);
    c->finish();
  }
  return ins;
}

} // namespace

FrameRange FrameRange::parse(const std::string& text) {
  FrameRange r;
  std::vector<std::string> parts;
  std::string cur;
  for (char ch : text) {
    if (ch == ':') {
      parts.push_back(cur);
      cur.clear();
    } else if (ch != ' ') {
      cur += ch;
    }
  }
  parts.push_back(cur);
  auto bad = [&]() -> FrameRange {
    fail_config("the frame range \"" + text + "\" is not of the form start:stop[:step] such as \"0:\" or \"10:20:2\"");
  };
  if (parts.size() == 1) {
    // A single index selects one frame.
    auto v = parse_int(parts[0]);
    if (!v || *v < 0 || *v == std::numeric_limits<std::int64_t>::max()) return bad(); // stop = v + 1
    r.start = *v;
    r.stop = *v + 1;
    return r;
  }
  if (parts.size() > 3) return bad();
  // "5:2" selects nothing whatever the data: a mistake in the range itself.
  auto start = parts[0].empty() ? std::optional<std::int64_t>(0) : parse_int(parts[0]);
  auto stop = parse_int(parts[1]);
  if (start && stop && *stop <= *start)
    fail_config("the frame range \"" + text + "\" is empty: its stop must be greater than its start");
  if (!parts[0].empty()) {
    auto v = parse_int(parts[0]);
    if (!v || *v < 0) return bad();
    r.start = *v;
  }
  if (!parts[1].empty()) {
    auto v = parse_int(parts[1]);
    if (!v || *v < 0) return bad();
    r.stop = *v;
  }
  if (parts.size() == 3 && !parts[2].empty()) {
    auto v = parse_int(parts[2]);
    if (!v || *v < 1) return bad();
    r.step = *v;
  }
  return r;
}

std::vector<std::int64_t> FrameRange::select(std::int64_t count) const {
  std::vector<std::int64_t> out;
  const std::int64_t end = stop ? std::min(*stop, count) : count;
  for (std::int64_t i = start; i < end; i += step) {
    out.push_back(i);
    if (end - i <= step) break; // i + step would pass the end (or overflow)
  }
  return out;
}

std::int64_t FrameRange::size(std::int64_t count) const {
  const std::int64_t end = stop ? std::min(*stop, count) : count;
  if (start >= end) return 0;
  return (end - start - 1) / step + 1;
}

std::string FrameRange::str() const {
  std::string s = std::to_string(start) + ":" + (stop ? std::to_string(*stop) : "");
  if (step != 1) s += ":" + std::to_string(step);
  return s;
}

Override Override::parse(const std::string& text) {
  auto eq = text.find('=');
  if (eq == std::string::npos || eq == 0)
    fail_config("--set expects KEY=VALUE such as output.path=out.h5, saw \"" + text + "\"");
  return {text.substr(0, eq), text.substr(eq + 1)};
}

std::string Pipeline::text() const {
  std::ostringstream s;
  s << toml::toml_formatter(table, toml::toml_formatter::default_flags & ~toml::format_flags::indentation);
  s << '\n';
  return s.str();
}

Pipeline load_pipeline(const std::string& path, const std::vector<Override>& overrides) {
  std::error_code ec; // the throwing overloads fail on e.g. a too long name
  if (!fs::exists(path, ec)) fail_config("pipeline file does not exist", in_file(path));
  if (fs::is_directory(path, ec)) fail_config("this is a folder, not a pipeline file", in_file(path));
  const std::string text = read_file(path, ErrorKind::config);
  const std::string folder = fs::path(path).parent_path().string();
  return load_pipeline_text(text, path, folder.empty() ? "." : folder, overrides);
}

Pipeline load_pipeline_text(const std::string& text, const std::string& file, const std::string& folder,
                            const std::vector<Override>& overrides) {
  Pipeline pl;
  pl.file = file;
  pl.table = parse_toml(text, file);
  for (const Override& o : overrides) apply_override(pl.table, o);

  Params root(pl.table, file, "");
  // Unknown top-level tables first: a misspelt [output] is reported as such.
  for (const char* k : {"input", "instrument", "stage", "output", "run"}) root.node(k);
  root.finish();

  // [input]
  {
    const toml::node* n = root.node("input");
    if (!n || !n->is_table()) fail_config("missing [input] table with path and dataset", in_file(file));
    Params p(*n->as_table(), file, "[input]");
    auto path = p.string("path");
    if (!path || path->empty()) p.fail("path", "missing: give the HDF5 file of holograms");
    pl.input.path = resolve(folder, *path);
    pl.input.dataset = p.string("dataset", "/holograms");
    if (auto fr = p.string("frames")) {
      try {
        pl.input.frames = FrameRange::parse(*fr);
      } catch (const Error& e) {
        p.fail("frames", e.message());
      }
    }
    if (auto bg = p.string("background")) {
      // "file.h5:/dataset" or just "file.h5" (same dataset name as the input)
      auto colon = bg->rfind(":/");
      std::string bpath = colon == std::string::npos ? *bg : bg->substr(0, colon);
      pl.input.background_dataset = colon == std::string::npos ? pl.input.dataset : bg->substr(colon + 1);
      pl.input.background_path = resolve(folder, bpath);
    }
    p.finish();
  }

  // [instrument], merged over the profile it names
  {
    toml::node* n = pl.table.get("instrument");
    root.node("instrument");
    if (!n || !n->is_table())
      fail_config("missing [instrument] table (wavelength, pixel_pitch, magnification, ...)", in_file(file));
    toml::table& ins = *n->as_table();
    if (toml::node* prof = ins.get("profile")) {
      if (!prof->is_string()) {
        ErrorContext c = position(file, *prof);
        c.key = "[instrument]: profile";
        throw Error(ErrorKind::config, "expected the path of an instrument profile as a string", c);
      }
      pl.profile_file = resolve(folder, prof->as_string()->get());
      std::error_code ec; // not the throwing fs::exists: a too long name is a user's error
      const fs::file_status st = fs::status(pl.profile_file, ec);
      if (!fs::is_regular_file(st)) {
        ErrorContext c = position(file, *prof);
        c.key = "[instrument]: profile";
        const std::string why = fs::is_directory(st) ? "is a folder, not a file"
                                : fs::exists(st)     ? "is not a regular file"
                                : ec && ec != std::errc::no_such_file_or_directory ? "cannot be read: " + ec.message()
                                                                                   : "does not exist";
        throw Error(ErrorKind::config, "instrument profile \"" + pl.profile_file + "\" " + why, c);
      }
      toml::table pt = parse_toml(read_file(pl.profile_file, ErrorKind::config), pl.profile_file);
      // A profile is either bare keys or an [instrument] table plus a name.
      toml::table* src = pt.get("instrument") ? pt.get("instrument")->as_table() : &pt;
      if (!src) fail_config("[instrument] in the profile must be a table", in_file(pl.profile_file));
      Params pp(pt, pl.profile_file, "profile");
      pp.string("name");
      pp.string("description");
      if (src != &pt) {
        pp.node("instrument");
        pp.finish();
      }
      // Keys in the pipeline file win over the profile.
      for (auto&& [k, v] : *src) {
        if (k.str() == "name" || k.str() == "description") continue;
        // Moved, not copied: a copied toml++ node forgets its file and line.
        if (!ins.contains(k.str())) ins.insert(k, std::move(v));
      }
      ins.erase("profile");
    }
    Params p(ins, file, "[instrument]");
    pl.instrument = read_instrument(p);
    p.finish();
  }

  // [[stage]]
  {
    const toml::node* n = root.node("stage");
    const toml::array* arr = n ? n->as_array() : nullptr;
    if (n && (!arr || !arr->is_array_of_tables())) {
      ErrorContext c = position(file, *n);
      c.key = "stage";
      throw Error(ErrorKind::config, "stages are written as [[stage]] tables", c);
    }
    if (!arr || arr->empty()) fail_config("no [[stage]] tables: nothing to do", in_file(file));
    std::size_t i = 0;
    for (const toml::node& sn : *arr) {
      ++i;
      const toml::table& st = *sn.as_table();
      Params p(st, file, "stage " + std::to_string(i));
      auto type = p.string("type");
      if (!type) p.fail("type", "missing: every [[stage]] needs a type");
      const StageInfo* info = find_stage(*type);
      if (!info) {
        std::string known;
        std::vector<std::string_view> types;
        for (const StageInfo& s : stage_registry()) {
          known += (known.empty() ? "" : ", ") + std::string(s.type);
          types.push_back(s.type);
        }
        const std::string hint = did_you_mean_in(*type, types);
        p.fail("type", "unknown stage type \"" + *type + "\"" + (hint.empty() ? "; known types: " + known : hint));
      }
      Params sp(st, file, "stage " + std::to_string(i) + " (" + *type + ")");
      sp.string("type");
      pl.stages.push_back(info->make(sp));
      pl.stage_types.push_back(*type);
      sp.finish();
    }
  }

  // [output]
  {
    const toml::node* n = root.node("output");
    if (!n || !n->is_table()) fail_config("missing [output] table with path", in_file(file));
    Params p(*n->as_table(), file, "[output]");
    auto path = p.string("path");
    if (!path || path->empty()) p.fail("path", "missing: give the HDF5 file to write");
    pl.output.path = resolve(folder, *path);
    pl.output.height = p.choice("height", {"none", "transmission", "reflection"}, "none");
    if (pl.output.height == "transmission") {
      auto dn = p.number("index_difference");
      if (!dn || *dn == 0 || std::abs(*dn) > 3)
        p.fail("index_difference", "height = \"transmission\" needs the index difference of sample and medium, "
                                   "e.g. index_difference = 0.04");
      pl.output.index_difference = *dn;
    } else if (p.has("index_difference")) {
      p.fail("index_difference", "only used with height = \"transmission\"");
    }
    if (auto prods = p.strings("products")) {
      for (const std::string& s : *prods) {
        if (s == "height" && pl.output.height == "none")
          p.fail("products", "the height product needs height = \"transmission\" or \"reflection\" in [output]");
        if (s != "field" && s != "amplitude" && s != "phase" && s != "opd" && s != "height")
          p.fail("products", "unknown product \"" + s + "\"; known: field, amplitude, phase, opd, height");
      }
      if (prods->empty()) p.fail("products", "empty: name at least one of field, amplitude, phase, opd");
      pl.output.products = *prods;
    } else if (pl.output.height != "none") {
      pl.output.products.push_back("height");
    }
    pl.output.compression = p.choice("compression", {"none", "deflate"}, "none");
    pl.output.level = static_cast<int>(p.number_in("level", 1, 9, 4));
    if (const toml::node* pv = p.node("previews")) {
      if (auto s = pv->as_string()) {
        if (s->get() == "first") pl.output.preview_every = 0;
        else if (s->get() == "none") pl.output.preview_every = -1;
        else p.fail("previews", "expected \"first\", \"none\" or a frame interval k (every k-th frame)");
      } else if (auto k = pv->as_integer(); k && k->get() >= 1) {
        pl.output.preview_every = static_cast<int>(k->get());
      } else {
        p.fail("previews", "expected \"first\", \"none\" or a frame interval k >= 1");
      }
    }
    p.finish();
  }

  // [run] (optional): threads, frames in flight, FFT planning
  if (const char* env = std::getenv("WAVESTACK_FFT_PLANNING")) {
    const std::string e = env;
    if (e == "measure" || e == "estimate") pl.run.fft_planning = e;
    else fail_config("WAVESTACK_FFT_PLANNING must be \"measure\" or \"estimate\", saw \"" + e + "\"");
  }
  if (const toml::node* n = root.node("run")) {
    if (!n->is_table()) fail_config("[run] must be a table", in_file(file));
    Params p(*n->as_table(), file, "[run]");
    pl.run.threads = static_cast<int>(p.number_in("threads", 0, 1024, 0));
    pl.run.tokens = static_cast<int>(p.number_in("frames_in_flight", 0, 4096, 0));
    if (p.has("fft_planning")) pl.run.fft_planning = p.choice("fft_planning", {"measure", "estimate"}, "measure");
    if (auto w = p.string("fft_wisdom")) pl.run.fft_wisdom = (*w == "auto" || *w == "none") ? *w : resolve(folder, *w);
    p.finish();
  }
  return pl;
}

} // namespace wavestack::pipeline
