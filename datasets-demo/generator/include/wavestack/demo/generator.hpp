#pragma once
// Deterministic demo data: off-axis holograms of cells and beads in water,
// recorded through an invented 40×/0.75 NA microscope at 632.8 nm, with the
// objects a known distance out of focus. Used by `wavestack demo` and by the
// end-to-end tests; see datasets-demo/README.md for the scene and its truth.
//
// Physics of one frame (all object-space quantities, DESIGN.md physical
// model; formulas and sources in shared/REFERENCES.md (the project's shared notes)):
//  1. Object at focus in the projection approximation:
//       O0 = A·exp(iφ),  φ = 2π/λ0 · Σ Δn_k·t_k(x, y),
//       A = exp(−2π/λ0 · Σ κ_k·t_k(x, y)),
//     t_k the thickness of object k along the axis, Δn_k its index minus the
//     medium's, κ_k its (small) extinction index. Pixel (r, c) is the point
//     (y, x) = (r·dy, c·dx): point sampling, no pixel-area integration.
//  2. Band limit of the objective: a hard pupil |f| <= NA/λ0 applied in the
//     angular spectrum (coherent cutoff [common practice]).
//  3. Defocus: wavestack::propagate::AngularSpectrum over +defocus without
//     padding (periodic), applied like the pupil to the scattered part
//     O0 − 1 only; the clear field, a unit plane wave, just takes the phase
//     exp(i2π·defocus·n/λ0). That is exact as long as the objects stay
//     farther from the frame edges than their light spreads over the defocus
//     (write_demo_data warns otherwise).
//  4. Recording: I = E·|R + O|², R = r·exp(−i2π(fcx·x + fcy·y)), so O·R*
//     (the +1 order, DESIGN.md) sits at +fc; E a smooth illumination envelope
//     (Gaussian, a few % vignetting); scaled into 12 bits; shot noise as a
//     Gaussian with variance gain·signal (Poisson in the large-count limit)
//     plus read noise; rounded and clipped to 0..4095.
// The background hologram is the same recording with no objects (O = 1):
// same reference, envelope and scale, its own noise.
//
// Determinism: every random number comes from std::mt19937_64 (whose output
// sequence the C++ standard fixes) seeded per frame from DemoScenario::seed,
// turned into normal deviates by a Box–Muller transform written here (the
// standard library's distributions are implementation-defined). FFT plans
// use FFTW_ESTIMATE. The output does not depend on the number of threads.
#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

namespace wavestack::demo {

/// A cell-like phase object: a smooth dome with a denser nucleus.
/// Lengths in metres, positions measured from the centre of pixel (0, 0)
/// (y down the rows, x along the columns), at frame 0.
struct DemoCell {
  double y = 0, x = 0;            ///< centre
  double vy = 0, vx = 0;          ///< drift per frame
  double semi_a = 0, semi_b = 0;  ///< in-plane semi-axes (a along the angle)
  double angle = 0;               ///< rad, from +x towards +y
  double height = 0;              ///< thickness at the centre
  double delta_n = 0;             ///< cytoplasm index − medium index
  double kappa = 0;               ///< extinction index of the cytoplasm
  /// Nucleus: an ellipsoid inside the cell, offset from the cell centre,
  /// semi-axes in the plane (same angle) and a full thickness along z.
  double nucleus_dy = 0, nucleus_dx = 0;
  double nucleus_a = 0, nucleus_b = 0;
  double nucleus_thickness = 0;
  double nucleus_delta_n = 0;     ///< extra index over the cytoplasm
  double nucleus_kappa = 0;
  std::string label;
};

/// A homogeneous sphere (bead). Same position conventions as DemoCell.
struct DemoBead {
  double y = 0, x = 0, vy = 0, vx = 0;
  double radius = 0;
  double delta_n = 0;             ///< bead index − medium index
  std::string label;
};

/// Everything that defines the demo data. The defaults are the documented
/// demo (datasets-demo/README.md).
struct DemoScenario {
  std::size_t frames = 16;
  std::size_t height = 1024;
  std::size_t width = 1024;

  // Instrument (calibration/demo-40x-0.75na.toml holds the same values).
  double wavelength = 632.8e-9;      ///< m, vacuum (He-Ne)
  double camera_pitch = 3.45e-6;     ///< m
  double magnification = 40.0;
  double numerical_aperture = 0.75;
  /// Water at 632.8 nm and 20 °C, absolute: Daimon & Masumura, Appl. Opt. 46,
  /// 3811 (2007) [confirmed coefficients; value derived].
  double medium_index = 1.33211;

  /// The recorded plane lies this far beyond the objects' focal plane (m);
  /// propagating by −defocus brings them into focus.
  double defocus = 8e-6;

  /// Off-axis carrier, cycles/m in object space (+1 order at +fc). The
  /// default is a diagonal carrier at non-integer bins; see generator.cpp for
  /// the separation margins. write_demo_data() rejects a carrier whose +1
  /// lobe (radius NA/λ0) touches the zero order or leaves the band.
  double carrier_fy = 2.72e6;
  double carrier_fx = 2.79e6;

  /// Recording: reference amplitude / clear object-wave amplitude, mean level
  /// of the clear field as a fraction of full scale, vignetting (relative
  /// intensity drop at the frame corners), full-well capacity (electrons at
  /// full scale, sets the shot-noise gain) and read noise (DN rms).
  double reference_ratio = 2.0;
  double mean_level = 0.5;
  double vignetting = 0.04;
  double full_well = 10000.0;
  double read_noise = 2.0;
  int bit_depth = 12;
  bool noise = true;                 ///< false: noise-free (rounded, clipped) values

  std::uint64_t seed = 0x5EED2024ULL;
  /// Worker threads; 0 = std::thread::hardware_concurrency().
  unsigned threads = 0;

  /// The objects. Empty = the built-in scene (default_cells/default_beads),
  /// laid out on the actual field of view.
  std::vector<DemoCell> cells;
  std::vector<DemoBead> beads;

  /// Also write <dir>/truth.h5: /opd (N,H,W) f32 in nm, the projection-
  /// approximation optical path difference at focus before the pupil.
  bool write_truth = false;
};

/// The built-in scene for a field of view of h·dy × w·dx metres: four cells
/// and five 1-µm polystyrene beads (Δn = 1.58753 − 1.33211, Sultanova et al.
/// 2009 fit at 632.8 nm [derived]). Positions scale with the field of view;
/// sizes and drifts are physical, shrunk only when the field is smaller than
/// the default 88.32 µm.
std::vector<DemoCell> default_cells(double fov_y, double fov_x);
std::vector<DemoBead> default_beads(double fov_y, double fov_x);

/// Truth of one object as written into the README and printed by `wavestack demo`.
struct DemoObjectTruth {
  std::string kind;    ///< "cell" or "bead"
  std::string label;
  double y = 0, x = 0;     ///< centre at frame 0 (m)
  double vy = 0, vx = 0;   ///< drift per frame (m)
  double size_a = 0, size_b = 0; ///< cell semi-axes or bead radius (m)
  double delta_n = 0;      ///< cytoplasm or bead index contrast
  double peak_opd = 0;     ///< largest OPD of this object at focus (m)
  double peak_phase = 0;   ///< the same as phase, 2π·OPD/λ0 (rad)
};

struct DemoSummary {
  std::string holograms_path;   ///< <dir>/holograms.h5
  std::string background_path;  ///< <dir>/background.h5
  std::string truth_path;       ///< <dir>/truth.h5 or empty
  std::string dataset = "/holograms";
  std::size_t frames = 0, height = 0, width = 0;
  double wavelength = 0, medium_index = 0, numerical_aperture = 0, magnification = 0;
  double camera_pitch = 0, object_pitch = 0;  ///< m
  double defocus = 0;            ///< m, the recorded plane beyond focus
  double refocus_distance = 0;   ///< m, = −defocus: the propagate distance to focus
  double carrier_fy = 0, carrier_fx = 0;       ///< cycles/m, object space
  double carrier_bin_y = 0, carrier_bin_x = 0; ///< fractional FFT bins of the frame
  double cutoff = 0;             ///< NA/λ0, cycles/m
  double nyquist_y = 0, nyquist_x = 0;         ///< 1/(2dy), 1/(2dx)
  double zero_order_gap = 0;     ///< |fc| − 3·NA/λ0 (> 0: orders separated)
  double band_margin_y = 0, band_margin_x = 0; ///< Nyquist − (|fc_axis| + NA/λ0)
  double mean_counts = 0;        ///< mean DN of the hologram stack
  double clipped_fraction = 0;   ///< pixels at 0 or full scale, whole stack
  std::vector<DemoObjectTruth> objects;
};

/// Write <dir>/holograms.h5 (dataset /holograms, N×H×W uint16) and
/// <dir>/background.h5 (dataset /holograms, 1×H×W uint16), creating `dir`
/// when needed; each file is written under a temporary name and renamed.
/// Throws Error(config) for an impossible scenario (sizes, carrier, NA) and
/// Error(output) naming the path when a file cannot be written.
DemoSummary write_demo_data(const std::string& dir, const DemoScenario& scenario = {});

/// Human-readable lines: files, instrument, carrier margins, truth table.
std::string describe(const DemoSummary& summary);

} // namespace wavestack::demo
