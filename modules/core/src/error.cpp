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
    out += ctx.file;
    if (ctx.line > 0) {
      out += ":" + std::to_string(ctx.line);
      if (ctx.column > 0) out += ":" + std::to_string(ctx.column);
    }
    out += ": ";
  }
  if (!ctx.key.empty()) out += ctx.key + ": ";
  out += message;
  std::string extra;
  if (!ctx.dataset.empty()) extra += "dataset " + ctx.dataset;
  if (ctx.frame) {
    if (!extra.empty()) extra += ", ";
    extra += "frame " + std::to_string(*ctx.frame);
  }
  if (!extra.empty()) out += " (" + extra + ")";
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
