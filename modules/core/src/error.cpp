#include "wavestack/core/error.hpp"

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

Error Error::with(const ErrorContext& more) const {
  ErrorContext c = ctx_;
  if (c.file.empty()) { c.file = more.file; c.line = more.line; c.column = more.column; }
  if (c.dataset.empty()) c.dataset = more.dataset;
  if (c.key.empty()) c.key = more.key;
  if (!c.frame) c.frame = more.frame;
  return Error(kind_, message_, c);
}

} // namespace wavestack
