#pragma once
// Field: a complex scalar wave sampled on a Grid.
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"

namespace wavestack {

struct Field {
  Image<cfloat> data;
  Grid grid;

  std::size_t height() const noexcept { return data.height(); }
  std::size_t width() const noexcept { return data.width(); }
};

} // namespace wavestack
