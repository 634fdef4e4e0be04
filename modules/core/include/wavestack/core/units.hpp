#pragma once
// Lengths are written as strings with a unit ("632.8 nm", "3.45 µm", "12 um",
// "0.5mm", "-20 um", "1e-6 m"). A bare number is never accepted: the caller
// must say what it means.
#include <optional>
#include <string>
#include <string_view>

namespace wavestack {

/// Parse a length into metres. Accepted units: pm nm um µm μm mm cm m.
/// Throws Error(config) with a sentence that shows the expected form.
double parse_length(std::string_view text);

/// Same, but returns nullopt instead of throwing; `why` receives the reason.
std::optional<double> try_parse_length(std::string_view text, std::string* why = nullptr);

/// Format metres with the most readable unit and `digits` significant
/// digits, e.g. 1.25e-5 -> "12.5 um". Non-finite values print as numbers.
std::string format_length(double metres, int digits = 6);

} // namespace wavestack
