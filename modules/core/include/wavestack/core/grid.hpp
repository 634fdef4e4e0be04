#pragma once
// Grid: the physical sampling of a field in object space (DESIGN.md physical
// model): pixel pitch = camera pitch / magnification, wavelength in vacuum,
// refractive index of the medium, and the axial plane the field sits in.
#include <cmath>

namespace wavestack {

struct Grid {
  double dy = 0.0;            ///< pixel pitch along rows (m, object space)
  double dx = 0.0;            ///< pixel pitch along columns (m, object space)
  double wavelength = 0.0;    ///< vacuum wavelength (m)
  double medium_index = 1.0;  ///< refractive index of the medium
  double plane = 0.0;         ///< axial position (m) relative to the hologram plane

  /// Wavelength in the medium, λ0/n.
  double medium_wavelength() const noexcept { return wavelength / medium_index; }
  /// Wavenumber in the medium, 2πn/λ0.
  double wavenumber() const noexcept { return 2.0 * M_PI * medium_index / wavelength; }
  bool operator==(const Grid&) const = default;
};

} // namespace wavestack
