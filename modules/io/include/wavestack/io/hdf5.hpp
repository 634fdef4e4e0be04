#pragma once
// Shared HDF5 plumbing of the io module: the library lock, attribute values,
// dataset listings for `wavestack inspect`, and file identity.
//
// Thread safety: Debian's HDF5 is not guaranteed to be built thread-safe, and
// the pipeline reads and writes from different threads at the same time. So
// every io function that calls HDF5 takes hdf5_mutex() for the duration of
// the call. Code outside io that calls HDF5 directly must take it too.
// Functions of this module never call back into user code while holding it.
//
// Errors: HDF5's automatic error printing is switched off; every HDF5 failure
// becomes a wavestack::Error naming the file, dataset and frame, of kind
// `input` while reading and `output` while writing. HDF5's own explanation,
// when it has one, follows the sentence in parentheses.
#include <cstdint>
#include <mutex>
#include <string>
#include <variant>
#include <vector>

namespace wavestack::io {

/// The one lock around every HDF5 call in the process.
std::mutex& hdf5_mutex();

/// A value to write as an attribute: a string (variable-length UTF-8), a
/// double, a 64-bit integer, or a 1-D array of doubles (e.g. pixel_pitch).
using AttributeValue = std::variant<std::string, double, std::int64_t, std::vector<double>>;

/// An attribute to write.
struct NamedAttribute {
  std::string name;
  AttributeValue value;
};
using Attributes = std::vector<NamedAttribute>;

/// An attribute as read back, for display: `type` is a numpy-like type name
/// ("string", "float64", "int64", ...) and `value` the value as text (arrays
/// as "[a, b, c]", long arrays shortened with "...").
struct Attribute {
  std::string name;
  std::string type;
  std::string value;
};

/// One dataset of a file, as `wavestack inspect` lists it.
struct DatasetInfo {
  std::string path;                  ///< absolute path inside the file, e.g. "/holograms"
  std::vector<std::uint64_t> shape;  ///< empty for a scalar
  std::string type;                  ///< numpy-like type name, e.g. "uint16"
  std::vector<std::uint64_t> chunk;  ///< chunk shape, empty when not chunked
  std::vector<std::string> filters;  ///< e.g. {"shuffle", "deflate"}
};

/// Every dataset in the file at `path` (hard links only, so each appears
/// once), at most `limit` of them. Error(input) when the file cannot be opened.
std::vector<DatasetInfo> list_datasets(const std::string& path, std::size_t limit = 1000);

/// Attributes of the object (group or dataset) at `object` ("/" for the
/// file's root). Error(input) when the file or object cannot be opened.
std::vector<Attribute> read_attributes(const std::string& path, const std::string& object = "/");

/// The value of one string attribute, e.g. the `pipeline` text of an output
/// file. Error(input) when the file, object or attribute is missing or the
/// attribute is not a string.
std::string read_string_attribute(const std::string& path, const std::string& object,
                                  const std::string& name);

/// True when both paths name the same existing file (same device and inode,
/// so hard links, symbolic links and different spellings are caught).
/// False when either does not exist.
bool same_file(const std::string& a, const std::string& b);

/// The HDF5 library version this build links against, e.g. "1.10.8".
std::string hdf5_version();

} // namespace wavestack::io
