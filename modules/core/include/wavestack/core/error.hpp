#pragma once
// Errors that carry where they happened. Every error maps to one exit status
// of the command line (DESIGN.md): 2 pipeline/command line, 3 input data,
// 4 output, 1 anything else.
#include <algorithm>
#include <cstdint>
#include <initializer_list>
#include <optional>
#include <stdexcept>
#include <string>
#include <string_view>

namespace wavestack {

enum class ErrorKind {
  config = 2,  ///< bad command line or pipeline file
  input = 3,   ///< bad input data (missing file, dataset, wrong shape/type)
  output = 4,  ///< output could not be written
  internal = 1 ///< anything else
};

/// Where an error happened. Every field is optional; what() prints the ones set.
struct ErrorContext {
  std::string file;     ///< file the error is about (pipeline file, HDF5 file)
  std::string dataset;  ///< HDF5 dataset path
  std::string key;      ///< pipeline key such as "stage[2].distance"
  std::optional<std::int64_t> frame; ///< source frame index
  int line = 0;         ///< 1-based line in `file`, 0 when unknown
  int column = 0;       ///< 1-based column in `file`, 0 when unknown
};

/// Context naming only a file.
inline ErrorContext in_file(std::string file) {
  ErrorContext c;
  c.file = std::move(file);
  return c;
}

/// The one exception type of wavestack: a sentence plus its context.
class Error : public std::runtime_error {
public:
  Error(ErrorKind kind, std::string message, ErrorContext ctx = {});

  ErrorKind kind() const noexcept { return kind_; }
  int exit_code() const noexcept { return static_cast<int>(kind_); }
  const ErrorContext& context() const noexcept { return ctx_; }
  const std::string& message() const noexcept { return message_; }

  /// Return a copy with context fields filled where they were empty.
  Error with(const ErrorContext& more) const;

private:
  static std::string format(const std::string& message, const ErrorContext& ctx);
  ErrorKind kind_;
  std::string message_;
  ErrorContext ctx_;
};

/// "; did you mean \"x\"?" for the candidate closest to `word` (an unknown
/// key, stage type or unit), or "" when none is close: edit distance with
/// transpositions at most max(1, length/3), ties to the earlier candidate.
std::string did_you_mean(std::string_view word, std::initializer_list<std::string_view> candidates);
template <class Range> std::string did_you_mean_in(std::string_view word, const Range& candidates);
std::size_t edit_distance(std::string_view a, std::string_view b);

template <class Range> std::string did_you_mean_in(std::string_view word, const Range& candidates) {
  std::string best;
  std::size_t best_d = std::max<std::size_t>(1, word.size() / 3) + 1;
  for (const auto& c : candidates) {
    const std::string_view cv(c);
    const std::size_t d = edit_distance(word, cv);
    if (d < best_d && cv != word) {
      best_d = d;
      best = std::string(cv);
    }
  }
  return best.empty() ? std::string() : "; did you mean \"" + best + "\"?";
}

[[noreturn]] inline void fail_config(std::string msg, ErrorContext ctx = {}) {
  throw Error(ErrorKind::config, std::move(msg), std::move(ctx));
}
[[noreturn]] inline void fail_input(std::string msg, ErrorContext ctx = {}) {
  throw Error(ErrorKind::input, std::move(msg), std::move(ctx));
}
[[noreturn]] inline void fail_output(std::string msg, ErrorContext ctx = {}) {
  throw Error(ErrorKind::output, std::move(msg), std::move(ctx));
}
[[noreturn]] inline void fail_internal(std::string msg, ErrorContext ctx = {}) {
  throw Error(ErrorKind::internal, std::move(msg), std::move(ctx));
}

} // namespace wavestack
