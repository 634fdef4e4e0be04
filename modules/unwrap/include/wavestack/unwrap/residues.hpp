#pragma once
// Phase residues (Goldstein, Zebker & Werner, Radio Science 23(4), 713–720
// (1988)): the charge of each elementary 2×2 loop of a wrapped phase map,
//   q = (1/2π)·[W(ψ[y,x+1] − ψ[y,x]) + W(ψ[y+1,x+1] − ψ[y,x+1])
//             + W(ψ[y+1,x] − ψ[y+1,x+1]) + W(ψ[y,x] − ψ[y+1,x])],
// W = wrap to [−π, π). The loop goes +x, +y, −x, −y, i.e. counter-clockwise
// in a frame with x = column to the right and y = row index: a vortex
// exp(+iθ), θ = atan2(y − y0, x − x0), gives q = +1 in the loop around
// (y0, x0). q ∈ {−1, 0, +1}; a non-zero q marks a residue, where every
// path-following unwrapper's result depends on the path and least squares
// is biased. The number of residues per frame is a quality figure.
#include "wavestack/core/image.hpp"

#include <cstddef>
#include <cstdint>

namespace wavestack::unwrap {

struct ResidueCount {
  std::size_t positive = 0; ///< loops with q = +1
  std::size_t negative = 0; ///< loops with q = −1
  std::size_t loops = 0;    ///< loops examined (all four corners valid)
  std::size_t total() const noexcept { return positive + negative; }
  /// Residues per examined loop (0 when no loop was examined).
  double density() const noexcept { return loops ? double(total()) / double(loops) : 0.0; }
};

/// Residue map of `wrapped` (h×w, any real values; h, w >= 2) into `map`
/// ((h−1)×(w−1); map(y, x) is the charge of the loop whose top-left corner
/// is pixel (y, x)). Loops with a non-finite corner get 0 and are not
/// counted. Throws Error(internal) on a wrong map shape. One pass, no
/// allocation.
ResidueCount residues(ImageView<const float> wrapped, ImageView<std::int8_t> map);
/// As above, skipping loops with a corner where `valid` (h×w) is 0.
ResidueCount residues(ImageView<const float> wrapped, ImageView<const std::uint8_t> valid,
                      ImageView<std::int8_t> map);
/// Counts only (no map).
ResidueCount count_residues(ImageView<const float> wrapped);
ResidueCount count_residues(ImageView<const float> wrapped, ImageView<const std::uint8_t> valid);

/// True when the frame has more than `max_total` residues (the pipeline
/// warns then: path-following results depend on the path).
inline bool exceeds(const ResidueCount& c, std::size_t max_total) noexcept { return c.total() > max_total; }
/// True when the residue density (residues per loop) exceeds `max_density`.
inline bool exceeds_density(const ResidueCount& c, double max_density) noexcept {
  return c.density() > max_density;
}

} // namespace wavestack::unwrap
