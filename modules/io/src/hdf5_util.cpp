#include "hdf5_util.hpp"

#include <sys/stat.h>

#include <charconv>
#include <cstdlib>
#include <cstring>
#include <ctime>

namespace wavestack::io {

std::mutex& hdf5_mutex() {
  static std::mutex m;
  return m;
}

namespace detail {

Lock::Lock() : lock_(hdf5_mutex()) {
  // The automatic error printer is per error stack, and error stacks are per
  // thread in thread-safe builds: switch it off once on every thread.
  thread_local bool silenced = false;
  if (!silenced) {
    H5Eset_auto2(H5E_DEFAULT, nullptr, nullptr);
    silenced = true;
  }
}

Hid file_access(bool strong_close) {
  Hid fapl = plist_hid(H5Pcreate(H5P_FILE_ACCESS));
  if (fapl) {
    if (strong_close) H5Pset_fclose_degree(fapl.get(), H5F_CLOSE_STRONG);
    H5Pset_file_locking(fapl.get(), true, true);
    // Metadata cache capped at 256 KiB. By default it grows towards the whole
    // chunk index of a long stack (one v1 B-tree leaf per ~64 frames, each
    // about 21 KiB in memory though counted as 3 KiB), although a streaming
    // reader or writer touches each leaf only while passing it: the input's
    // index alone made a 20 000-frame run 7 MB larger than a 1 000-frame one
    // (tests/bench/run-long-run-check.sh).
    H5AC_cache_config_t mdc{};
    mdc.version = H5AC__CURR_CACHE_CONFIG_VERSION;
    if (H5Pget_mdc_config(fapl.get(), &mdc) >= 0) {
      mdc.set_initial_size = true;
      mdc.initial_size = 256 * 1024;
      mdc.min_size = 64 * 1024;
      mdc.max_size = 256 * 1024;
      H5Pset_mdc_config(fapl.get(), &mdc);
    }
    take_hdf5_message();
  }
  return fapl;
}

namespace {
herr_t collect_error(unsigned, const H5E_error2_t* err, void* data) {
  auto* out = static_cast<std::vector<std::string>*>(data);
  std::string text;
  char minor[256] = {0};
  if (H5Eget_msg(err->min_num, nullptr, minor, sizeof minor) > 0) text = minor;
  if (err->desc && *err->desc) {
    if (!text.empty()) text += ": ";
    // A failed write() is described over two lines with buffer addresses;
    // the system's reason ("No space left on device") is what tells.
    const std::string desc = err->desc;
    const std::string tag = "error message = '";
    const std::size_t at = desc.find(tag), end = at == std::string::npos ? at : desc.find('\'', at + tag.size());
    text += end == std::string::npos ? desc : desc.substr(at + tag.size(), end - at - tag.size());
  }
  for (char& c : text)
    if (c == '\n' || c == '\r') c = ' '; // errors are one line
  out->push_back(text);
  return 0;
}
} // namespace

std::string take_hdf5_message() {
  std::vector<std::string> entries;
  H5Ewalk2(H5E_DEFAULT, H5E_WALK_DOWNWARD, collect_error, &entries);
  H5Eclear2(H5E_DEFAULT);
  // Walking downward, the last entry is the innermost function, where the
  // problem was detected: it is the most specific explanation.
  for (auto it = entries.rbegin(); it != entries.rend(); ++it)
    if (!it->empty()) return *it;
  return {};
}

void fail_hdf5(ErrorKind kind, std::string message, ErrorContext ctx) {
  const std::string why = take_hdf5_message();
  if (!why.empty()) message += " (HDF5: " + why + ")";
  throw Error(kind, std::move(message), std::move(ctx));
}

namespace {
std::string order_suffix(hid_t type) {
  return H5Tget_order(type) == H5T_ORDER_BE ? " (big-endian)" : "";
}
} // namespace

std::string describe_type(hid_t type) {
  const H5T_class_t cls = H5Tget_class(type);
  const std::size_t size = H5Tget_size(type);
  switch (cls) {
  case H5T_INTEGER: {
    const bool sign = H5Tget_sign(type) == H5T_SGN_2;
    return std::string(sign ? "int" : "uint") + std::to_string(size * 8) + order_suffix(type);
  }
  case H5T_FLOAT: return "float" + std::to_string(size * 8) + order_suffix(type);
  case H5T_STRING: return H5Tis_variable_str(type) > 0 ? "string" : "string (fixed length " + std::to_string(size) + ")";
  case H5T_COMPOUND: {
    std::string s = "compound {";
    const int n = H5Tget_nmembers(type);
    for (int i = 0; i < n && i < 8; ++i) {
      char* name = H5Tget_member_name(type, static_cast<unsigned>(i));
      Hid mt = type_hid(H5Tget_member_type(type, static_cast<unsigned>(i)));
      if (i) s += ", ";
      s += std::string(name ? name : "?") + ": " + (mt ? describe_type(mt.get()) : "?");
      if (name) H5free_memory(name);
    }
    if (n > 8) s += ", ...";
    return s + "}";
  }
  case H5T_ENUM: {
    Hid base = type_hid(H5Tget_super(type));
    return "enum of " + (base ? describe_type(base.get()) : std::string("?"));
  }
  case H5T_ARRAY: {
    Hid base = type_hid(H5Tget_super(type));
    return "array of " + (base ? describe_type(base.get()) : std::string("?"));
  }
  case H5T_VLEN: return "variable-length sequence";
  case H5T_OPAQUE: return "opaque";
  case H5T_BITFIELD: return "bitfield" + std::to_string(size * 8);
  case H5T_REFERENCE: return "reference";
  case H5T_TIME: return "time";
  default: return "unknown type";
  }
}

std::string damaged_layout(hid_t type) {
  const H5T_class_t cls = H5Tget_class(type);
  if (cls != H5T_INTEGER && cls != H5T_FLOAT) return {};
  const std::size_t bits = 8 * H5Tget_size(type);
  const std::size_t precision = H5Tget_precision(type);
  const int offset = H5Tget_offset(type);
  if (precision == 0 || offset < 0 || static_cast<std::size_t>(offset) + precision > bits)
    return std::to_string(precision) + " significant bits at offset " + std::to_string(offset) + " in " +
           std::to_string(bits) + "-bit elements";
  if (cls == H5T_FLOAT) {
    std::size_t spos = 0, epos = 0, esize = 0, mpos = 0, msize = 0;
    if (H5Tget_fields(type, &spos, &epos, &esize, &mpos, &msize) < 0 || spos >= precision ||
        epos + esize > precision || mpos + msize > precision || esize == 0 || esize > 32 || msize == 0)
      return "a floating-point layout that does not fit its " + std::to_string(precision) + " bits";
  }
  return {};
}

std::vector<std::uint64_t> space_shape(hid_t space) {
  const int rank = H5Sget_simple_extent_ndims(space);
  if (rank <= 0) return {};
  std::vector<hsize_t> dims(static_cast<std::size_t>(rank));
  H5Sget_simple_extent_dims(space, dims.data(), nullptr);
  return {dims.begin(), dims.end()};
}

std::string format_double(double v) {
  char buf[64];
  auto r = std::to_chars(buf, buf + sizeof buf, v);
  return std::string(buf, r.ptr);
}

namespace {
std::string join_values(const std::vector<std::string>& values, bool scalar) {
  if (scalar && values.size() == 1) return values[0];
  std::string s = "[";
  for (std::size_t i = 0; i < values.size(); ++i) {
    if (i) s += ", ";
    s += values[i];
  }
  return s + "]";
}
} // namespace

Attribute read_attribute(hid_t attr) {
  Attribute out;
  char name[1024] = {0};
  H5Aget_name(attr, sizeof name, name);
  out.name = name;
  Hid type = type_hid(H5Aget_type(attr));
  Hid space = space_hid(H5Aget_space(attr));
  if (!type || !space) {
    take_hdf5_message();
    out.type = "unreadable";
    return out;
  }
  out.type = describe_type(type.get());
  if (!damaged_layout(type.get()).empty()) {
    out.value = "<unreadable>";
    return out;
  }
  const bool scalar = H5Sget_simple_extent_type(space.get()) == H5S_SCALAR;
  const hssize_t npoints = H5Sget_simple_extent_npoints(space.get());
  const std::size_t n = npoints > 0 ? static_cast<std::size_t>(npoints) : 0;
  constexpr std::size_t show = 16; // values shown; longer arrays end in "..."
  std::vector<std::string> values;
  const H5T_class_t cls = H5Tget_class(type.get());
  bool ok = true;
  if (n == 0) {
    out.value = "[]";
    return out;
  }
  if (cls == H5T_STRING) {
    if (H5Tis_variable_str(type.get()) > 0) {
      Hid mem = type_hid(H5Tcopy(H5T_C_S1));
      H5Tset_size(mem.get(), H5T_VARIABLE);
      H5Tset_cset(mem.get(), H5Tget_cset(type.get()));
      std::vector<char*> ptrs(n, nullptr);
      ok = H5Aread(attr, mem.get(), ptrs.data()) >= 0;
      for (std::size_t i = 0; i < n; ++i) {
        if (ok && i < show) values.emplace_back(ptrs[i] ? ptrs[i] : "");
        if (ptrs[i]) H5free_memory(ptrs[i]);
      }
    } else {
      const std::size_t len = H5Tget_size(type.get());
      Hid mem = type_hid(H5Tcopy(type.get()));
      std::vector<char> buf(n * len + 1, '\0');
      ok = H5Aread(attr, mem.get(), buf.data()) >= 0;
      for (std::size_t i = 0; ok && i < n && i < show; ++i) {
        std::string s(buf.data() + i * len, len);
        while (!s.empty() && (s.back() == '\0' || s.back() == ' ')) s.pop_back();
        values.push_back(std::move(s));
      }
    }
  } else if (cls == H5T_INTEGER && H5Tget_sign(type.get()) == H5T_SGN_NONE) {
    std::vector<unsigned long long> v(n);
    ok = H5Aread(attr, H5T_NATIVE_ULLONG, v.data()) >= 0;
    for (std::size_t i = 0; ok && i < n && i < show; ++i) values.push_back(std::to_string(v[i]));
  } else if (cls == H5T_INTEGER) {
    std::vector<long long> v(n);
    ok = H5Aread(attr, H5T_NATIVE_LLONG, v.data()) >= 0;
    for (std::size_t i = 0; ok && i < n && i < show; ++i) values.push_back(std::to_string(v[i]));
  } else if (cls == H5T_FLOAT) {
    std::vector<double> v(n);
    ok = H5Aread(attr, H5T_NATIVE_DOUBLE, v.data()) >= 0;
    for (std::size_t i = 0; ok && i < n && i < show; ++i) values.push_back(format_double(v[i]));
  } else {
    out.value = "<" + out.type + ">";
    return out;
  }
  if (!ok) {
    take_hdf5_message();
    out.value = "<unreadable>";
    return out;
  }
  if (n > show) values.push_back("... (" + std::to_string(n) + " values)");
  out.value = join_values(values, scalar);
  return out;
}

namespace {
herr_t collect_attribute(hid_t loc, const char* name, const H5A_info_t*, void* data) {
  auto* out = static_cast<std::vector<Attribute>*>(data);
  Hid a = attr_hid(H5Aopen(loc, name, H5P_DEFAULT));
  if (!a) {
    take_hdf5_message();
    out->push_back({name, "unreadable", ""});
    return 0;
  }
  out->push_back(read_attribute(a.get()));
  return 0;
}
} // namespace

std::vector<Attribute> read_all_attributes(hid_t object) {
  std::vector<Attribute> out;
  hsize_t idx = 0;
  H5Aiterate2(object, H5_INDEX_NAME, H5_ITER_INC, &idx, collect_attribute, &out);
  take_hdf5_message();
  return out;
}

void write_attribute(hid_t object, const std::string& name, const AttributeValue& value, ErrorKind kind,
                     const ErrorContext& ctx) {
  const auto fail = [&] { fail_hdf5(kind, "could not write the attribute '" + name + "'", ctx); };
  const htri_t exists = H5Aexists(object, name.c_str());
  if (exists < 0) fail();
  if (exists > 0 && H5Adelete(object, name.c_str()) < 0) fail();

  Hid type, space;
  const void* buf = nullptr;
  const char* str = nullptr;
  hid_t mem = H5I_INVALID_HID;
  if (const auto* s = std::get_if<std::string>(&value)) {
    type = type_hid(H5Tcopy(H5T_C_S1));
    H5Tset_size(type.get(), H5T_VARIABLE);
    H5Tset_cset(type.get(), H5T_CSET_UTF8);
    space = space_hid(H5Screate(H5S_SCALAR));
    str = s->c_str();
    buf = &str;
    mem = type.get();
  } else if (const auto* d = std::get_if<double>(&value)) {
    type = type_hid(H5Tcopy(H5T_IEEE_F64LE));
    space = space_hid(H5Screate(H5S_SCALAR));
    buf = d;
    mem = H5T_NATIVE_DOUBLE;
  } else if (const auto* i = std::get_if<std::int64_t>(&value)) {
    type = type_hid(H5Tcopy(H5T_STD_I64LE));
    space = space_hid(H5Screate(H5S_SCALAR));
    buf = i;
    mem = H5T_NATIVE_INT64;
  } else {
    const auto& v = std::get<std::vector<double>>(value);
    type = type_hid(H5Tcopy(H5T_IEEE_F64LE));
    const hsize_t n = v.size();
    space = space_hid(n ? H5Screate_simple(1, &n, nullptr) : H5Screate(H5S_NULL));
    buf = v.data();
    mem = H5T_NATIVE_DOUBLE;
  }
  if (!type || !space) fail();
  Hid attr = attr_hid(H5Acreate2(object, name.c_str(), type.get(), space.get(), H5P_DEFAULT, H5P_DEFAULT));
  if (!attr) fail();
  if (H5Sget_simple_extent_type(space.get()) != H5S_NULL && H5Awrite(attr.get(), mem, buf) < 0) fail();
}

PathKind path_kind(hid_t file, const std::string& path) {
  if (path.empty()) return PathKind::none;
  if (path == "/") return PathKind::group;
  // Check every link from the root down: H5Lexists fails (rather than
  // answering false) when an intermediate component is missing.
  std::size_t pos = 1;
  while (pos <= path.size()) {
    std::size_t next = path.find('/', pos);
    if (next == std::string::npos) next = path.size();
    const std::string prefix = path.substr(0, next);
    const htri_t e = H5Lexists(file, prefix.c_str(), H5P_DEFAULT);
    if (e <= 0) {
      take_hdf5_message();
      return PathKind::none;
    }
    if (next < path.size()) {
      Hid o = object_hid(H5Oopen(file, prefix.c_str(), H5P_DEFAULT));
      if (!o || H5Iget_type(o.get()) != H5I_GROUP) {
        take_hdf5_message();
        return PathKind::none;
      }
    }
    pos = next + 1;
  }
  Hid o = object_hid(H5Oopen(file, path.c_str(), H5P_DEFAULT));
  if (!o) {
    take_hdf5_message(); // e.g. a dangling soft link
    return PathKind::none;
  }
  switch (H5Iget_type(o.get())) {
  case H5I_DATASET: return PathKind::dataset;
  case H5I_GROUP: return PathKind::group;
  default: return PathKind::other;
  }
}

namespace {
struct ListContext {
  std::vector<DatasetInfo>* out;
  std::size_t limit;
};

DatasetInfo describe_dataset(hid_t dset, const std::string& path) {
  DatasetInfo info;
  info.path = path;
  Hid space = space_hid(H5Dget_space(dset));
  if (space) info.shape = space_shape(space.get());
  Hid type = type_hid(H5Dget_type(dset));
  info.type = type ? describe_type(type.get()) : "unreadable";
  Hid dcpl = plist_hid(H5Dget_create_plist(dset));
  if (dcpl) {
    if (H5Pget_layout(dcpl.get()) == H5D_CHUNKED) {
      const int rank = H5Pget_chunk(dcpl.get(), 0, nullptr);
      if (rank > 0) {
        std::vector<hsize_t> c(static_cast<std::size_t>(rank));
        H5Pget_chunk(dcpl.get(), rank, c.data());
        info.chunk.assign(c.begin(), c.end());
      }
    }
    const int nf = H5Pget_nfilters(dcpl.get());
    for (int i = 0; i < nf; ++i) {
      unsigned flags = 0, config = 0;
      std::size_t nelmts = 0;
      char name[128] = {0};
      const H5Z_filter_t id = H5Pget_filter2(dcpl.get(), static_cast<unsigned>(i), &flags, &nelmts, nullptr,
                                             sizeof name, name, &config);
      switch (id) {
      case H5Z_FILTER_DEFLATE: info.filters.emplace_back("deflate"); break;
      case H5Z_FILTER_SHUFFLE: info.filters.emplace_back("shuffle"); break;
      case H5Z_FILTER_FLETCHER32: info.filters.emplace_back("fletcher32"); break;
      case H5Z_FILTER_SZIP: info.filters.emplace_back("szip"); break;
      case H5Z_FILTER_NBIT: info.filters.emplace_back("nbit"); break;
      case H5Z_FILTER_SCALEOFFSET: info.filters.emplace_back("scaleoffset"); break;
      default: info.filters.emplace_back(name[0] ? std::string(name) : "filter " + std::to_string(id));
      }
    }
  }
  take_hdf5_message();
  return info;
}

herr_t visit_link(hid_t group, const char* name, const H5L_info_t* info, void* data) {
  auto* ctx = static_cast<ListContext*>(data);
  if (info->type != H5L_TYPE_HARD) return 0;
  Hid o = object_hid(H5Oopen(group, name, H5P_DEFAULT));
  if (!o) {
    take_hdf5_message();
    return 0;
  }
  if (H5Iget_type(o.get()) == H5I_DATASET) {
    ctx->out->push_back(describe_dataset(o.get(), "/" + std::string(name)));
    if (ctx->out->size() >= ctx->limit) return 1; // stop visiting
  }
  return 0;
}
} // namespace

std::vector<DatasetInfo> list_datasets(hid_t file, std::size_t limit) {
  std::vector<DatasetInfo> out;
  if (limit == 0) return out;
  ListContext ctx{&out, limit};
  H5Lvisit(file, H5_INDEX_NAME, H5_ITER_INC, visit_link, &ctx);
  take_hdf5_message();
  return out;
}

void create_parent_groups(hid_t file, const std::string& path, ErrorKind kind, const ErrorContext& ctx) {
  std::size_t pos = 1;
  while (true) {
    const std::size_t next = path.find('/', pos);
    if (next == std::string::npos) return;
    const std::string prefix = path.substr(0, next);
    const htri_t e = H5Lexists(file, prefix.c_str(), H5P_DEFAULT);
    if (e < 0) fail_hdf5(kind, "could not look up the group '" + prefix + "'", ctx);
    if (e == 0) {
      Hid g = group_hid(H5Gcreate2(file, prefix.c_str(), H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT));
      if (!g) fail_hdf5(kind, "could not create the group '" + prefix + "'", ctx);
    } else if (path_kind(file, prefix) != PathKind::group) {
      throw Error(kind, "'" + prefix + "' exists but is not a group", ctx);
    }
    pos = next + 1;
  }
}

std::string absolute_path(const std::string& dataset) {
  std::string p = dataset;
  if (p.empty() || p[0] != '/') p.insert(p.begin(), '/');
  while (p.size() > 1 && p.back() == '/') p.pop_back();
  return p;
}

std::string iso8601_utc_now() {
  const std::time_t t = std::time(nullptr);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y-%m-%dT%H:%M:%SZ", &tm);
  return buf;
}

} // namespace detail

// --- public helpers ----------------------------------------------------------

using namespace detail;

Hid detail::open_for_reading(const std::string& path) {
  struct stat st {};
  if (::stat(path.c_str(), &st) != 0)
    fail_input("cannot open the file: it does not exist", where(path));
  if (S_ISDIR(st.st_mode)) fail_input("cannot open the file: it is a folder", where(path));
  const htri_t is = H5Fis_hdf5(path.c_str());
  if (is == 0) {
    take_hdf5_message();
    fail_input("this is not an HDF5 file", where(path));
  }
  Hid fapl = file_access();
  Hid f = file_hid(H5Fopen(path.c_str(), H5F_ACC_RDONLY, fapl.get()));
  if (!f) fail_hdf5(ErrorKind::input, "cannot open the HDF5 file", where(path));
  return f;
}

std::vector<DatasetInfo> list_datasets(const std::string& path, std::size_t limit) {
  Lock lock;
  Hid f = open_for_reading(path);
  return detail::list_datasets(f.get(), limit);
}

std::vector<Attribute> read_attributes(const std::string& path, const std::string& object) {
  Lock lock;
  Hid f = open_for_reading(path);
  const std::string obj = absolute_path(object);
  if (path_kind(f.get(), obj) == PathKind::none)
    fail_input("there is no object '" + obj + "' in the file", where(path, obj));
  Hid o = object_hid(H5Oopen(f.get(), obj.c_str(), H5P_DEFAULT));
  if (!o) fail_hdf5(ErrorKind::input, "cannot open '" + obj + "'", where(path, obj));
  return read_all_attributes(o.get());
}

std::string read_string_attribute(const std::string& path, const std::string& object, const std::string& name) {
  Lock lock;
  Hid f = open_for_reading(path);
  const std::string obj = absolute_path(object);
  const ErrorContext ctx = where(path, obj);
  if (path_kind(f.get(), obj) == PathKind::none) fail_input("there is no object '" + obj + "' in the file", ctx);
  Hid o = object_hid(H5Oopen(f.get(), obj.c_str(), H5P_DEFAULT));
  if (!o) fail_hdf5(ErrorKind::input, "cannot open '" + obj + "'", ctx);
  const htri_t e = H5Aexists(o.get(), name.c_str());
  if (e <= 0) {
    take_hdf5_message();
    fail_input("there is no attribute '" + name + "' on '" + obj + "'", ctx);
  }
  Hid a = attr_hid(H5Aopen(o.get(), name.c_str(), H5P_DEFAULT));
  if (!a) fail_hdf5(ErrorKind::input, "cannot open the attribute '" + name + "'", ctx);
  Hid t = type_hid(H5Aget_type(a.get()));
  Hid s = space_hid(H5Aget_space(a.get()));
  if (!t || H5Tget_class(t.get()) != H5T_STRING || !s || H5Sget_simple_extent_npoints(s.get()) != 1)
    fail_input("the attribute '" + name + "' on '" + obj + "' is not a single string", ctx);
  Attribute v = read_attribute(a.get());
  if (v.value == "<unreadable>") fail_input("cannot read the attribute '" + name + "'", ctx);
  return v.value;
}

bool same_file(const std::string& a, const std::string& b) {
  struct stat sa {}, sb {};
  if (::stat(a.c_str(), &sa) != 0 || ::stat(b.c_str(), &sb) != 0) return false;
  return sa.st_dev == sb.st_dev && sa.st_ino == sb.st_ino;
}

std::string hdf5_version() {
  unsigned maj = 0, min = 0, rel = 0;
  H5get_libversion(&maj, &min, &rel);
  return std::to_string(maj) + "." + std::to_string(min) + "." + std::to_string(rel);
}

} // namespace wavestack::io
