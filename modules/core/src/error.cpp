#include "wavestack/core/error.hpp"

#include <algorithm>
#include <vector>

namespace wavestack {

Error::Error(ErrorKind kind, std::string message, ErrorContext ctx)
    : std::runtime_error(format(message, ctx)), kind_(kind), message_(std::move(message)),
      ctx_(std::move(ctx)) {}

std::string Error::format(const std::string& message, const ErrorContext& ctx) {
  // "file:line:column: " prefix as compilers print it, then the sentence, then
  // the remaining context in parentheses.
  std::string out;
  if (!ctx.file.empty()) {
    out.append(ctx.file);
    if (ctx.line > 0) {
      out.append(":").append(std::to_string(ctx.line));
      if (ctx.column > 0) out.append(":").append(std::to_string(ctx.column));
    }
    out.append(": ");
  }
  if (!ctx.key.empty()) out.append(ctx.key).append(": ");
  out.append(message);
  std::string extra;
  if (!ctx.dataset.empty()) extra.append("dataset ").append(ctx.dataset);
  if (ctx.frame) {
    if (!extra.empty()) extra.append(", ");
    extra.append("frame ").append(std::to_string(*ctx.frame));
  }
  if (!extra.empty()) out.append(" (").append(extra).append(")");
  return out;
}

std::size_t edit_distance(std::string_view a, std::string_view b) {
  // Optimal string alignment distance: insertions, deletions, substitutions
  // and swaps of neighbours ("distnace") each cost one.
  const std::size_t n = a.size(), m = b.size();
  std::vector<std::vector<std::size_t>> d(n + 1, std::vector<std::size_t>(m + 1));
  for (std::size_t i = 0; i <= n; ++i) d[i][0] = i;
  for (std::size_t j = 0; j <= m; ++j) d[0][j] = j;
  for (std::size_t i = 1; i <= n; ++i)
    for (std::size_t j = 1; j <= m; ++j) {
      const std::size_t cost = a[i - 1] == b[j - 1] ? 0 : 1;
      d[i][j] = std::min({d[i - 1][j] + 1, d[i][j - 1] + 1, d[i - 1][j - 1] + cost});
      if (i > 1 && j > 1 && a[i - 1] == b[j - 2] && a[i - 2] == b[j - 1])
        d[i][j] = std::min(d[i][j], d[i - 2][j - 2] + 1);
    }
  return d[n][m];
}

std::string did_you_mean(std::string_view word, std::initializer_list<std::string_view> candidates) {
  return did_you_mean_in(word, candidates);
}

Error Error::with(const ErrorContext& more) const {
  ErrorContext c = ctx_;
  if (c.file.empty()) { c.file = more.file; c.line = more.line; c.column = more.column; }
  if (c.dataset.empty()) c.dataset = more.dataset;
  if (c.key.empty()) c.key = more.key;
  if (!c.frame) c.frame = more.frame;
  return Error(kind_, message_, c);
}

} // namespace wavestack
