#pragma once
// Internal helpers shared by the io sources: RAII identifiers, the library
// lock, HDF5 error-stack capture and attribute conversion. Not installed.
#include "wavestack/core/error.hpp"
#include "wavestack/io/hdf5.hpp"

#include <hdf5.h>

#include <cstdint>
#include <mutex>
#include <optional>
#include <string>
#include <vector>

namespace wavestack::io::detail {

/// An ErrorContext naming a file, and optionally a dataset and a frame.
inline ErrorContext where(const std::string& file, const std::string& dataset = {},
                          std::optional<std::int64_t> frame = {}) {
  ErrorContext c;
  c.file = file;
  c.dataset = dataset;
  c.frame = frame;
  return c;
}

/// Owns one HDF5 identifier. The destructor does NOT take the library lock:
/// every Hid is either a local of a function that holds the lock (declared
/// after the lock, so destroyed before it is released) or a member of an
/// object whose destructor takes the lock before releasing its members.
class Hid {
public:
  using Closer = herr_t (*)(hid_t);
  Hid() = default;
  Hid(hid_t id, Closer close) : id_(id), close_(close) {}
  Hid(const Hid&) = delete;
  Hid& operator=(const Hid&) = delete;
  Hid(Hid&& o) noexcept : id_(o.id_), close_(o.close_) { o.id_ = H5I_INVALID_HID; }
  Hid& operator=(Hid&& o) noexcept {
    if (this != &o) {
      reset();
      id_ = o.id_;
      close_ = o.close_;
      o.id_ = H5I_INVALID_HID;
    }
    return *this;
  }
  ~Hid() { reset(); }

  void reset() noexcept {
    if (id_ >= 0 && close_) close_(id_);
    id_ = H5I_INVALID_HID;
  }
  /// Close now and report whether HDF5 succeeded (used where a failed close
  /// means data was not written, e.g. the file itself).
  bool close() noexcept {
    herr_t r = 0;
    if (id_ >= 0 && close_) r = close_(id_);
    id_ = H5I_INVALID_HID;
    return r >= 0;
  }
  hid_t get() const noexcept { return id_; }
  explicit operator bool() const noexcept { return id_ >= 0; }

private:
  hid_t id_ = H5I_INVALID_HID;
  Closer close_ = nullptr;
};

inline Hid file_hid(hid_t id) { return {id, H5Fclose}; }
inline Hid dataset_hid(hid_t id) { return {id, H5Dclose}; }
inline Hid space_hid(hid_t id) { return {id, H5Sclose}; }
inline Hid type_hid(hid_t id) { return {id, H5Tclose}; }
inline Hid plist_hid(hid_t id) { return {id, H5Pclose}; }
inline Hid group_hid(hid_t id) { return {id, H5Gclose}; }
inline Hid attr_hid(hid_t id) { return {id, H5Aclose}; }
inline Hid object_hid(hid_t id) { return {id, H5Oclose}; }

/// File access properties: HDF5's file locking kept but ignored where the
/// file system does not support it (network file systems) instead of
/// failing to open. `strong_close` (for the output file only) makes H5Fclose
/// really close and flush the file, so it can be renamed right after; it is
/// not used for inputs, where two sources may share one file (holograms and
/// background) and one closing must not close the other's datasets. The
/// metadata cache is capped at 256 KiB, so memory stays flat over long
/// stacks whose chunk index is larger.
Hid file_access(bool strong_close = false);

/// Open a file read-only (for listing, attributes, merging) with clear
/// errors: Error(input) when it is missing, a folder or not HDF5. Call with
/// the lock held.
Hid open_for_reading(const std::string& path);

/// Holds hdf5_mutex() and makes sure HDF5 prints nothing by itself on the
/// calling thread (the error stack is per thread in thread-safe builds).
class Lock {
public:
  Lock();
  Lock(const Lock&) = delete;
  Lock& operator=(const Lock&) = delete;

private:
  std::unique_lock<std::mutex> lock_;
};

/// The most specific message on the current HDF5 error stack (e.g. "file
/// signature not found"), then the stack is cleared. Empty when none.
std::string take_hdf5_message();

/// Throw Error(kind) with `message`, adding HDF5's own explanation in
/// parentheses when there is one. Must be called with the lock held.
[[noreturn]] void fail_hdf5(ErrorKind kind, std::string message, ErrorContext ctx);

/// numpy-like name of an HDF5 datatype: "uint16", "float32",
/// "compound {r: float32, i: float32}", "string", "enum", ...
std::string describe_type(hid_t type);

/// Why the bit layout of an integer or float type cannot be right (a
/// precision or bit offset beyond its size, a float field outside it), or
/// empty when it can. A damaged file can say so, and HDF5 1.10's type
/// conversion then overruns its own stack buffers: check before any read
/// that converts.
std::string damaged_layout(hid_t type);

/// Shape of a dataspace (empty for scalars); rank -1 for null spaces.
std::vector<std::uint64_t> space_shape(hid_t space);

/// Read one attribute and format its value as text.
Attribute read_attribute(hid_t attr);
std::vector<Attribute> read_all_attributes(hid_t object);

/// Write (or replace) an attribute on an open object.
void write_attribute(hid_t object, const std::string& name, const AttributeValue& value,
                     ErrorKind kind, const ErrorContext& ctx);

/// What a path inside a file names.
enum class PathKind { none, group, dataset, other };
/// Walks the path one component at a time so a missing intermediate group
/// is "none" rather than an HDF5 error.
PathKind path_kind(hid_t file, const std::string& path);

/// Every dataset reachable by hard links, in visiting order (at most `limit`).
std::vector<DatasetInfo> list_datasets(hid_t file, std::size_t limit);

/// Create the groups leading to `path` ("/a/b/c" creates /a and /a/b).
void create_parent_groups(hid_t file, const std::string& path, ErrorKind kind, const ErrorContext& ctx);

/// Normalise a dataset path: leading '/', no trailing '/'.
std::string absolute_path(const std::string& dataset);

/// Shortest round-trip text of a double ("0.5", "6.328e-07").
std::string format_double(double v);

/// The current time in UTC as ISO 8601, e.g. "2026-12-02T03:47:00Z" (the
/// `created` attribute).
std::string iso8601_utc_now();

} // namespace wavestack::io::detail
