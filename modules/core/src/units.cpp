#include "wavestack/core/units.hpp"

#include "wavestack/core/error.hpp"

#include <algorithm>
#include <cctype>
#include <charconv>
#include <cmath>
#include <cstdio>
#include <utility>

namespace wavestack {
namespace {

std::string_view trim(std::string_view s) {
  while (!s.empty() && std::isspace(static_cast<unsigned char>(s.front()))) s.remove_prefix(1);
  while (!s.empty() && std::isspace(static_cast<unsigned char>(s.back()))) s.remove_suffix(1);
  return s;
}

struct Unit {
  std::string_view name;
  double scale;
};
// "µ" is U+00B5 (micro sign), "μ" is U+03BC (Greek mu); both appear in practice.
constexpr Unit units[] = {{"pm", 1e-12}, {"nm", 1e-9},      {"um", 1e-6}, {"\xC2\xB5m", 1e-6},
                          {"\xCE\xBCm", 1e-6}, {"mm", 1e-3}, {"cm", 1e-2}, {"m", 1.0}};

/// "; did you mean \"nm\"?" for a unit typo: another case ("NM"), a word
/// ("microns"), swapped letters ("mn") or one letter off ("nn").
std::string suggest_unit(std::string_view unit) {
  std::string low(unit);
  for (char& c : low) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  if (!low.empty() && low.back() == 's' && low.size() > 3) low.pop_back(); // "microns", "meters"
  if (low.ends_with("metre")) low.replace(low.size() - 5, 5, "meter");
  static constexpr std::pair<std::string_view, std::string_view> words[] = {
      {"picometer", "pm"},  {"nanometer", "nm"}, {"micrometer", "um"}, {"micron", "um"},
      {"millimeter", "mm"}, {"centimeter", "cm"}, {"meter", "m"},      {"u", "um"}, {"mu", "um"}};
  for (const auto& [w, u] : words)
    if (low == w) return "; did you mean \"" + std::string(u) + "\"?";
  for (std::string_view u : {"pm", "nm", "um", "mm", "cm", "m"}) {
    if (low == u) return "; did you mean \"" + std::string(u) + "\"?"; // wrong case
    std::string a = low, b(u);
    std::sort(a.begin(), a.end());
    std::sort(b.begin(), b.end());
    if (a == b) return "; did you mean \"" + std::string(u) + "\"?"; // swapped letters
  }
  // Prefer the two-letter units: "nn" is "nm" rather than "m".
  return did_you_mean(low, {"nm", "um", "mm", "pm", "cm", "m"});
}

} // namespace

std::optional<double> try_parse_length(std::string_view text, std::string* why) {
  auto set = [&](std::string m) {
    if (why) *why = std::move(m);
    return std::nullopt;
  };
  std::string_view s = trim(text);
  if (s.empty()) return set("expected a length with a unit such as \"12.5 um\", saw an empty string");
  // Number part: std::from_chars for doubles (g++ 12 has it).
  const char* begin = s.data();
  const char* end = s.data() + s.size();
  if (*begin == '+') ++begin;
  double value = 0.0;
  auto [ptr, ec] = std::from_chars(begin, end, value);
  if (ec != std::errc() || ptr == begin)
    return set("expected a length with a unit such as \"12.5 um\", saw \"" + std::string(s) + "\"");
  std::string_view unit = trim(std::string_view(ptr, static_cast<std::size_t>(end - ptr)));
  if (unit.empty())
    return set("expected a length with a unit such as \"" + std::string(s) + " um\", saw the bare number \"" +
               std::string(s) + "\"");
  for (const Unit& u : units) {
    if (unit == u.name) {
      if (!std::isfinite(value)) return set("length \"" + std::string(s) + "\" is not finite");
      return value * u.scale;
    }
  }
  return set("unknown length unit \"" + std::string(unit) + "\" in \"" + std::string(s) + "\"" +
             suggest_unit(unit) + " (units: pm, nm, um or µm, mm, cm, m)");
}

double parse_length(std::string_view text) {
  std::string why;
  auto v = try_parse_length(text, &why);
  if (!v) fail_config(why);
  return *v;
}

std::string format_length(double metres, int digits) {
  char buf[64];
  if (!std::isfinite(metres)) {
    std::snprintf(buf, sizeof buf, "%g", metres);
    return buf;
  }
  const double a = std::fabs(metres);
  const char* unit = "m";
  double scale = 1.0;
  if (a == 0.0) { unit = "um"; scale = 1e-6; }
  else if (a < 1e-6) { unit = "nm"; scale = 1e-9; }
  else if (a < 1e-3) { unit = "um"; scale = 1e-6; }
  else if (a < 1.0) { unit = "mm"; scale = 1e-3; }
  std::snprintf(buf, sizeof buf, "%.*g %s", digits, metres / scale, unit);
  return buf;
}

} // namespace wavestack
