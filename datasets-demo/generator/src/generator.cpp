// Demo data generator; physics and conventions in generator.hpp.
#include "wavestack/demo/generator.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/fft/fft.hpp"
#include "wavestack/propagate/angular_spectrum.hpp"

#include <hdf5.h>

#include <algorithm>
#include <atomic>
#include <cmath>
#include <cstdio>
#include <exception>
#include <filesystem>
#include <mutex>
#include <random>
#include <sstream>
#include <thread>

namespace wavestack::demo {
namespace {

constexpr double two_pi = 2.0 * M_PI;

// Default carrier (object space, dx = 86.25 nm, 1024 × 1024) [derived]:
//   NA/λ0 = 0.75 / 632.8 nm = 1.1852 µm⁻¹ (lobe radius, coherent cutoff);
//   Nyquist 1/(2dx) = 5.7971 µm⁻¹;
//   fc = (fy, fx) = (2.72, 2.79) µm⁻¹, |fc| = 3.8964 µm⁻¹ = 3.29 NA/λ0.
//   Zero order: |O|² reaches 2 NA/λ0 = 2.3704 µm⁻¹; the +1 lobe starts at
//     |fc| − NA/λ0 = 2.7112 µm⁻¹: a gap of 0.3408 µm⁻¹ (30 bins) beyond the
//     separation condition |fc| >= 3 NA/λ0 (Cuche, Marquet & Depeursinge,
//     Appl. Opt. 39(23) 4070 (2000)) [from memory]; a sideband mask with a
//     10 % soft edge (outer radius 1.30 µm⁻¹) still clears the zero order.
//   Band: fx + NA/λ0 = 3.9752, fy + NA/λ0 = 3.9052 µm⁻¹ < 5.7971: margins of
//     1.82 and 1.89 µm⁻¹ on each axis, so the lobe is not aliased.
//   Twin (−1) lobe at −fc: 2|fc| = 7.79 µm⁻¹ away, also clear of its aliases.
//   Mask radius / |fc| = 0.304 < 1/3 (the DESIGN.md limit of `radius`).
//   Bins of a 1024 frame (88.32 µm): (240.23, 246.41), non-integer on
//     purpose; fringe period 1/(|fc| dx) = 2.98 px.

std::uint64_t splitmix64(std::uint64_t x) {
  // Steele, Lea & Flood, "Fast splittable pseudorandom number generators",
  // OOPSLA 2014 (the SplitMix64 finaliser) [from memory]: decorrelates seeds.
  x += 0x9E3779B97F4A7C15ULL;
  x = (x ^ (x >> 30)) * 0xBF58476D1CE4E5B9ULL;
  x = (x ^ (x >> 27)) * 0x94D049BB133111EBULL;
  return x ^ (x >> 31);
}

/// Normal deviates from mt19937_64 by the Box–Muller transform (Box &
/// Muller, Ann. Math. Stat. 29, 610 (1958)) [from memory]; deterministic on
/// every standard library, unlike std::normal_distribution.
class Gaussian {
public:
  explicit Gaussian(std::uint64_t seed) : gen_(seed) {}
  double operator()() {
    if (has_spare_) {
      has_spare_ = false;
      return spare_;
    }
    const double u1 = 1.0 - uniform(); // (0, 1]
    const double u2 = uniform();
    const double r = std::sqrt(-2.0 * std::log(u1));
    spare_ = r * std::sin(two_pi * u2);
    has_spare_ = true;
    return r * std::cos(two_pi * u2);
  }

private:
  double uniform() { return static_cast<double>(gen_() >> 11) * 0x1.0p-53; } // [0, 1)
  std::mt19937_64 gen_;
  double spare_ = 0;
  bool has_spare_ = false;
};

// Centre of the illumination envelope, as fractions of the field of view.
constexpr double illumination_centre_y = 0.47, illumination_centre_x = 0.53;

// Stream index of the background hologram: independent of the frame count.
constexpr std::uint64_t background_stream = 0xB4C6'0000'0000ULL;

double cutoff_of(const DemoScenario& s) { return s.numerical_aperture / s.wavelength; }
double pitch_of(const DemoScenario& s) { return s.camera_pitch / s.magnification; }

void validate(const DemoScenario& s) {
  const auto bad = [](const std::string& what) { fail_config("demo scenario: " + what); };
  if (s.frames == 0 || s.height < 16 || s.width < 16)
    bad("need at least one frame of at least 16 x 16 pixels");
  if (s.height * s.width > (std::size_t{1} << 28)) bad("frames larger than 2^28 pixels are not supported");
  if (!(s.wavelength > 0) || !(s.camera_pitch > 0) || !(s.magnification > 0))
    bad("wavelength, camera pitch and magnification must be positive");
  if (!(s.medium_index >= 1.0)) bad("medium index must be at least 1");
  if (!(s.numerical_aperture > 0) || !(s.numerical_aperture < s.medium_index))
    bad("numerical aperture must lie between 0 and the medium index");
  if (s.bit_depth < 8 || s.bit_depth > 16) bad("bit depth must be 8..16");
  if (!(s.mean_level > 0 && s.mean_level < 1)) bad("mean level must lie between 0 and 1 of full scale");
  if (!(s.reference_ratio > 0)) bad("reference ratio must be positive");
  if (!(s.vignetting >= 0 && s.vignetting < 0.5)) bad("vignetting must lie in [0, 0.5)");
  if (!(s.full_well > 0) || !(s.read_noise >= 0)) bad("full well must be positive, read noise >= 0");
  if (!std::isfinite(s.defocus)) bad("defocus must be finite");
}

struct Margins {
  double fc, gap, band_y, band_x, nyq_y, nyq_x;
};

Margins margins_of(const DemoScenario& s) {
  const double d = pitch_of(s), r = cutoff_of(s);
  Margins m{};
  m.fc = std::hypot(s.carrier_fy, s.carrier_fx);
  m.gap = m.fc - 3.0 * r;
  m.nyq_y = m.nyq_x = 1.0 / (2.0 * d);
  m.band_y = m.nyq_y - (std::abs(s.carrier_fy) + r);
  m.band_x = m.nyq_x - (std::abs(s.carrier_fx) + r);
  return m;
}

ErrorContext where(const std::string& file, const std::string& dataset = {}) {
  ErrorContext c;
  c.file = file;
  c.dataset = dataset;
  return c;
}

std::string um(double metres, int precision = 3) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*f", precision, metres * 1e6);
  return buf;
}

// ---------------------------------------------------------------------------
// objects
// ---------------------------------------------------------------------------

struct Box {
  long r0, r1, c0, c1; // inclusive-exclusive pixel ranges, clipped to the frame
};

Box box_of(double y, double x, double radius, double dy, double dx, std::size_t h, std::size_t w) {
  const auto clip = [](double v, std::size_t n) {
    return static_cast<long>(std::clamp(v, 0.0, static_cast<double>(n)));
  };
  return {clip(std::floor((y - radius) / dy), h), clip(std::ceil((y + radius) / dy) + 1, h),
          clip(std::floor((x - radius) / dx), w), clip(std::ceil((x + radius) / dx) + 1, w)};
}

/// Thickness profile of a cell body: t = h (1 − ρ²)^{3/2}, smooth (C¹) at the
/// rim [common practice for a dome-like adherent cell model].
inline double dome(double rho2) {
  if (rho2 >= 1.0) return 0.0;
  const double q = 1.0 - rho2;
  return q * std::sqrt(q);
}

/// Add the OPD (Σ Δn·t) and the extinction path (Σ κ·t) of one cell at
/// frame t. Returns the largest OPD of the cell alone.
double add_cell(const DemoCell& c, double t, double dy, double dx, Image<double>& opd, Image<double>& ext) {
  const double cy = c.y + c.vy * t, cx = c.x + c.vx * t;
  const double ca = std::cos(c.angle), sa = std::sin(c.angle);
  const Box b = box_of(cy, cx, std::max(c.semi_a, c.semi_b), dy, dx, opd.height(), opd.width());
  const double ny = cy + c.nucleus_dy, nx = cx + c.nucleus_dx;
  double peak = 0;
  for (long r = b.r0; r < b.r1; ++r) {
    const double y = static_cast<double>(r) * dy;
    double* o = opd.row(static_cast<std::size_t>(r));
    double* e = ext.row(static_cast<std::size_t>(r));
    for (long k = b.c0; k < b.c1; ++k) {
      const double x = static_cast<double>(k) * dx;
      const double u = ((x - cx) * ca + (y - cy) * sa) / c.semi_a;
      const double v = (-(x - cx) * sa + (y - cy) * ca) / c.semi_b;
      const double body = c.height * dome(u * u + v * v);
      if (body <= 0) continue;
      double chord = 0;
      if (c.nucleus_a > 0 && c.nucleus_b > 0) {
        const double un = ((x - nx) * ca + (y - ny) * sa) / c.nucleus_a;
        const double vn = (-(x - nx) * sa + (y - ny) * ca) / c.nucleus_b;
        const double q = 1.0 - (un * un + vn * vn);
        // an ellipsoid's chord, never thicker than the cell around it
        if (q > 0) chord = std::min(c.nucleus_thickness * std::sqrt(q), body);
      }
      const double add = c.delta_n * body + c.nucleus_delta_n * chord;
      o[k] += add;
      e[k] += c.kappa * body + c.nucleus_kappa * chord;
      peak = std::max(peak, add);
    }
  }
  return peak;
}

/// Add one bead (sphere, projection approximation: t = 2 sqrt(R² − r²),
/// REFERENCES.md "Transparent sphere" [common practice]).
double add_bead(const DemoBead& s, double t, double dy, double dx, Image<double>& opd) {
  const double cy = s.y + s.vy * t, cx = s.x + s.vx * t;
  const Box b = box_of(cy, cx, s.radius, dy, dx, opd.height(), opd.width());
  double peak = 0;
  for (long r = b.r0; r < b.r1; ++r) {
    const double y = static_cast<double>(r) * dy - cy;
    double* o = opd.row(static_cast<std::size_t>(r));
    for (long k = b.c0; k < b.c1; ++k) {
      const double x = static_cast<double>(k) * dx - cx;
      const double q = s.radius * s.radius - x * x - y * y;
      if (q <= 0) continue;
      const double add = s.delta_n * 2.0 * std::sqrt(q);
      o[k] += add;
      peak = std::max(peak, add);
    }
  }
  return peak;
}

/// Warn when an object (with the spread of its defocused light) comes closer
/// to the frame edge than that spread: the periodic propagation would wrap it.
void check_edges(const DemoScenario& s, const std::vector<DemoCell>& cells,
                 const std::vector<DemoBead>& beads) {
  const double d = pitch_of(s);
  const double fov_y = static_cast<double>(s.height) * d, fov_x = static_cast<double>(s.width) * d;
  const double sin_t = s.numerical_aperture / s.medium_index;
  const double spread = std::abs(s.defocus) * sin_t / std::sqrt(1.0 - sin_t * sin_t);
  const double last = static_cast<double>(s.frames - 1);
  std::string near;
  const auto check = [&](const std::string& what, double y, double x, double vy, double vx, double r) {
    for (double t : {0.0, last}) {
      const double cy = y + vy * t, cx = x + vx * t;
      if (cy - r - spread < 0 || cx - r - spread < 0 || cy + r + spread > fov_y || cx + r + spread > fov_x) {
        near += (near.empty() ? "" : ", ") + what;
        return;
      }
    }
  };
  for (const auto& c : cells) check("cell " + c.label, c.y, c.x, c.vy, c.vx, std::max(c.semi_a, c.semi_b));
  for (const auto& b : beads) check("bead " + b.label, b.y, b.x, b.vy, b.vx, b.radius);
  if (!near.empty())
    log::warn("demo scenario: " + near + " come(s) within the " + um(spread, 1) +
                  " um that defocused light spreads from the frame edge; that light wraps around to the "
                  "opposite edge",
              "demo-edge");
}

// ---------------------------------------------------------------------------
// HDF5 writing (C API)
// ---------------------------------------------------------------------------

class Hid {
public:
  using Closer = herr_t (*)(hid_t);
  Hid(hid_t id, Closer close) : id_(id), close_(close) {}
  Hid(const Hid&) = delete;
  Hid& operator=(const Hid&) = delete;
  Hid(Hid&& o) noexcept : id_(o.id_), close_(o.close_) { o.id_ = -1; }
  Hid& operator=(Hid&&) = delete;
  ~Hid() {
    if (id_ >= 0) close_(id_);
  }
  hid_t get() const noexcept { return id_; }
  bool ok() const noexcept { return id_ >= 0; }
  /// Close now and report whether HDF5 succeeded (flushes a file).
  bool close() {
    const herr_t rc = id_ >= 0 ? close_(id_) : 0;
    id_ = -1;
    return rc >= 0;
  }

private:
  hid_t id_;
  Closer close_;
};

struct H5Writer {
  std::string path;    // final path, for messages
  std::string dataset; // for messages
  [[noreturn]] void fail(const std::string& what) const {
    fail_output("could not write the demo data: " + what + " failed", where(path, dataset));
  }
  void check(herr_t rc, const std::string& what) const {
    if (rc < 0) fail(what);
  }
  void check(const Hid& h, const std::string& what) const {
    if (!h.ok()) fail(what);
  }

  void attr(hid_t obj, const char* name, const std::string& value) const {
    Hid type(H5Tcopy(H5T_C_S1), H5Tclose);
    check(type, std::string("writing attribute ") + name);
    check(H5Tset_size(type.get(), H5T_VARIABLE), std::string("writing attribute ") + name);
    check(H5Tset_cset(type.get(), H5T_CSET_UTF8), std::string("writing attribute ") + name);
    Hid space(H5Screate(H5S_SCALAR), H5Sclose);
    Hid a(H5Acreate2(obj, name, type.get(), space.get(), H5P_DEFAULT, H5P_DEFAULT), H5Aclose);
    check(a, std::string("writing attribute ") + name);
    const char* p = value.c_str();
    check(H5Awrite(a.get(), type.get(), &p), std::string("writing attribute ") + name);
  }
  void attr(hid_t obj, const char* name, const std::vector<double>& values) const {
    const hsize_t n = values.size();
    Hid space(n == 1 ? H5Screate(H5S_SCALAR) : H5Screate_simple(1, &n, nullptr), H5Sclose);
    Hid a(H5Acreate2(obj, name, H5T_IEEE_F64LE, space.get(), H5P_DEFAULT, H5P_DEFAULT), H5Aclose);
    check(a, std::string("writing attribute ") + name);
    check(H5Awrite(a.get(), H5T_NATIVE_DOUBLE, values.data()), std::string("writing attribute ") + name);
  }
  void attr(hid_t obj, const char* name, double value) const { attr(obj, name, std::vector<double>{value}); }
  void attr_int(hid_t obj, const char* name, long long value) const {
    Hid space(H5Screate(H5S_SCALAR), H5Sclose);
    Hid a(H5Acreate2(obj, name, H5T_STD_I64LE, space.get(), H5P_DEFAULT, H5P_DEFAULT), H5Aclose);
    check(a, std::string("writing attribute ") + name);
    check(H5Awrite(a.get(), H5T_NATIVE_LLONG, &value), std::string("writing attribute ") + name);
  }
};

/// Create `<path>.partial`, let `body(writer, file id)` fill it, close it and
/// rename it to `path`; the partial file is removed on any error.
template <class Body> void write_file(const std::string& path, Body&& body) {
  namespace fs = std::filesystem;
  const std::string tmp = path + ".partial";
  try {
    H5Writer wr{path, {}};
    Hid file(H5Fcreate(tmp.c_str(), H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT), H5Fclose);
    wr.check(file, "creating the file");
    body(wr, file.get());
    wr.dataset.clear();
    if (!file.close()) wr.fail("closing the file");
    std::error_code ec;
    fs::rename(tmp, path, ec);
    if (ec) fail_output("could not rename " + tmp + " to the demo file: " + ec.message(), where(path));
  } catch (...) {
    std::error_code ec;
    fs::remove(tmp, ec);
    throw;
  }
}

/// Write `frames` as dataset `name` (N,H,W), chunk = one frame, and return
/// its handle (for attributes).
template <class T>
Hid write_dataset(H5Writer& wr, hid_t file, const std::string& name, const std::vector<Image<T>>& frames,
                  hid_t file_type, hid_t mem_type) {
  wr.dataset = name;
  const hsize_t dims[3] = {frames.size(), frames.front().height(), frames.front().width()};
  Hid space(H5Screate_simple(3, dims, nullptr), H5Sclose);
  Hid dcpl(H5Pcreate(H5P_DATASET_CREATE), H5Pclose);
  wr.check(space, "creating the dataspace");
  wr.check(dcpl, "creating the dataset properties");
  const hsize_t chunk[3] = {1, dims[1], dims[2]};
  wr.check(H5Pset_chunk(dcpl.get(), 3, chunk), "setting the chunk layout");
  // no modification times in the object header: the same scenario gives the same bytes
  wr.check(H5Pset_obj_track_times(dcpl.get(), false), "setting the dataset properties");
  Hid dset(H5Dcreate2(file, name.c_str(), file_type, space.get(), H5P_DEFAULT, dcpl.get(), H5P_DEFAULT), H5Dclose);
  wr.check(dset, "creating the dataset");
  const hsize_t mdims[2] = {dims[1], dims[2]};
  Hid mspace(H5Screate_simple(2, mdims, nullptr), H5Sclose);
  wr.check(mspace, "creating the memory dataspace");
  for (std::size_t n = 0; n < frames.size(); ++n) {
    const hsize_t start[3] = {n, 0, 0};
    const hsize_t count[3] = {1, dims[1], dims[2]};
    wr.check(H5Sselect_hyperslab(space.get(), H5S_SELECT_SET, start, nullptr, count, nullptr), "selecting a frame");
    wr.check(H5Dwrite(dset.get(), mem_type, mspace.get(), space.get(), H5P_DEFAULT, frames[n].data()),
             "writing frame " + std::to_string(n));
  }
  return dset;
}

// ---------------------------------------------------------------------------
// the renderer: shared read-only state + one job per frame
// ---------------------------------------------------------------------------

class Renderer {
public:
  Renderer(const DemoScenario& s, std::vector<DemoCell> cells, std::vector<DemoBead> beads)
      : s_(s), cells_(std::move(cells)), beads_(std::move(beads)), h_(s.height), w_(s.width),
        d_(pitch_of(s)), full_scale_((1 << s.bit_depth) - 1),
        grid_{d_, d_, s.wavelength, s.medium_index, 0.0},
        fwd_(fft::plan_c2c(h_, w_, fft::Direction::forward)),
        inv_(fft::plan_c2c(h_, w_, fft::Direction::backward)),
        asm_(h_, w_, grid_, s.defocus, propagate::AngularSpectrumOptions{1.0, true}) {
    // pupil |f| <= NA/λ0 with the 1/(h·w) of the forward-inverse pair folded in
    pupil_.resize(h_, w_);
    const double rc = cutoff_of(s), norm = 1.0 / static_cast<double>(h_ * w_);
    for (std::size_t r = 0; r < h_; ++r) {
      const double fy = fft::bin_frequency(r, h_, d_);
      for (std::size_t c = 0; c < w_; ++c) {
        const double fx = fft::bin_frequency(c, w_, d_);
        pupil_(r, c) = fx * fx + fy * fy <= rc * rc ? static_cast<float>(norm) : 0.0f;
      }
    }
    // reference R = r·exp(−i2π(fcx x + fcy y)); the phase is reduced modulo
    // one cycle in double before the float conversion
    ref_.resize(h_, w_);
    for (std::size_t r = 0; r < h_; ++r) {
      const double py = s.carrier_fy * static_cast<double>(r) * d_;
      for (std::size_t c = 0; c < w_; ++c) {
        double cyc = py + s.carrier_fx * static_cast<double>(c) * d_;
        cyc -= std::floor(cyc);
        ref_(r, c) = cfloat(static_cast<float>(s.reference_ratio * std::cos(two_pi * cyc)),
                            static_cast<float>(-s.reference_ratio * std::sin(two_pi * cyc)));
      }
    }
    // illumination envelope: a Gaussian centred slightly off the frame
    // centre, 1 − vignetting at the farthest corner
    env_.resize(h_, w_);
    const double fov_y = static_cast<double>(h_) * d_, fov_x = static_cast<double>(w_) * d_;
    const double y0 = illumination_centre_y * fov_y, x0 = illumination_centre_x * fov_x;
    double far2 = 0;
    for (double y : {0.0, fov_y})
      for (double x : {0.0, fov_x}) far2 = std::max(far2, (y - y0) * (y - y0) + (x - x0) * (x - x0));
    const double inv2s2 = s.vignetting > 0 ? -std::log(1.0 - s.vignetting) / far2 : 0.0;
    double sum = 0;
    for (std::size_t r = 0; r < h_; ++r) {
      const double y = static_cast<double>(r) * d_ - y0;
      for (std::size_t c = 0; c < w_; ++c) {
        const double x = static_cast<double>(c) * d_ - x0;
        env_(r, c) = static_cast<float>(std::exp(-(x * x + y * y) * inv2s2));
        sum += env_(r, c);
      }
    }
    const double env_mean = sum / static_cast<double>(h_ * w_);
    // the clear field's mean intensity E·(r² + 1) maps to mean_level of full scale
    scale_ = s.mean_level * full_scale_ / (env_mean * (s.reference_ratio * s.reference_ratio + 1.0));
    gain_ = full_scale_ / s.full_well; // DN per electron
    double cyc = s.defocus * s.medium_index / s.wavelength; // on-axis phase in cycles
    cyc -= std::floor(cyc);
    plane_wave_ = cfloat(static_cast<float>(std::cos(two_pi * cyc)), static_cast<float>(std::sin(two_pi * cyc)));
  }

  struct Workspace {
    Image<double> opd, ext;
    Image<cfloat> field, spectrum;
    propagate::AngularSpectrum::Workspace asm_ws;
  };
  Workspace make_workspace() const {
    Workspace ws;
    ws.opd.resize(h_, w_);
    ws.ext.resize(h_, w_);
    ws.field.resize(h_, w_);
    ws.spectrum.resize(h_, w_);
    ws.asm_ws = asm_.make_workspace();
    return ws;
  }

  /// Render frame `t` (objects present) or the background (objects = false)
  /// into `out`. `peaks` receives each object's peak OPD when not null,
  /// `opd` the OPD map (nm) and `amp` the amplitude at focus when not null.
  void render(std::size_t t, bool objects, Workspace& ws, Image<std::uint16_t>& out,
              std::vector<double>* peaks, Image<float>* opd, Image<float>* amp) const {
    ws.opd.fill(0.0);
    ws.ext.fill(0.0);
    if (objects) {
      const double tf = static_cast<double>(t);
      for (const auto& c : cells_) {
        const double p = add_cell(c, tf, d_, d_, ws.opd, ws.ext);
        if (peaks) peaks->push_back(p);
      }
      for (const auto& b : beads_) {
        const double p = add_bead(b, tf, d_, d_, ws.opd);
        if (peaks) peaks->push_back(p);
      }
    }
    // 1. O0 = A exp(iφ) at focus
    const double k0 = two_pi / s_.wavelength;
    if (opd && amp) {
      opd->resize(h_, w_);
      amp->resize(h_, w_);
      for (std::size_t i = 0; i < h_ * w_; ++i) {
        opd->data()[i] = static_cast<float>(ws.opd.data()[i] * 1e9);
        amp->data()[i] = static_cast<float>(std::exp(-k0 * ws.ext.data()[i]));
      }
    }
    for (std::size_t i = 0; i < h_ * w_; ++i) {
      // the scattered part O0 − 1: zero in the clear medium (most of the frame)
      if (ws.opd.data()[i] == 0.0 && ws.ext.data()[i] == 0.0) {
        ws.field.data()[i] = cfloat(0.0f, 0.0f);
        continue;
      }
      const double a = std::exp(-k0 * ws.ext.data()[i]);
      const double ph = k0 * ws.opd.data()[i];
      ws.field.data()[i] = cfloat(static_cast<float>(a * std::cos(ph) - 1.0), static_cast<float>(a * std::sin(ph)));
    }
    // 2. objective pupil and 3. defocus, both linear: applied to the
    // scattered part only, the unit plane wave just takes the on-axis phase
    // exp(i 2π z n/λ0) (its only bin, DC, is inside the pupil). The scattered
    // part fades away from the objects, so the small zero padding that
    // AngularSpectrum adds for sizes without a good FFT length is harmless.
    if (objects) {
      fwd_->execute(ws.field.data(), ws.spectrum.data());
      for (std::size_t i = 0; i < h_ * w_; ++i) ws.spectrum.data()[i] *= pupil_.data()[i];
      inv_->execute(ws.spectrum.data(), ws.field.data());
      asm_.apply(ws.field.view(), ws.field.view(), ws.asm_ws);
    }
    for (std::size_t i = 0; i < h_ * w_; ++i) ws.field.data()[i] += plane_wave_;
    // 4. record
    out.resize(h_, w_);
    Gaussian gauss(splitmix64(s_.seed ^ splitmix64(objects ? t : background_stream)));
    const double read2 = s_.read_noise * s_.read_noise;
    for (std::size_t i = 0; i < h_ * w_; ++i) {
      const std::complex<double> u(ws.field.data()[i]);
      const std::complex<double> rr(ref_.data()[i]);
      const double sig = scale_ * env_.data()[i] * std::norm(rr + u);
      double v = sig;
      if (s_.noise) v += std::sqrt(gain_ * sig + read2) * gauss();
      const double q = std::clamp(std::nearbyint(v), 0.0, static_cast<double>(full_scale_));
      out.data()[i] = static_cast<std::uint16_t>(q);
    }
  }

  int full_scale() const noexcept { return full_scale_; }

private:
  const DemoScenario& s_;
  std::vector<DemoCell> cells_;
  std::vector<DemoBead> beads_;
  std::size_t h_, w_;
  double d_;
  int full_scale_;
  Grid grid_;
  std::shared_ptr<const fft::C2C> fwd_, inv_;
  propagate::AngularSpectrum asm_;
  Image<float> pupil_, env_;
  Image<cfloat> ref_;
  double scale_ = 1, gain_ = 1;
  cfloat plane_wave_{1.0f, 0.0f}; ///< the clear field after the defocus
};

void set_truth_attrs(const H5Writer& wr, hid_t ds, const DemoScenario& s) {
  const double d = pitch_of(s);
  wr.attr(ds, "pixel_pitch", std::vector<double>{d, d});
  wr.attr(ds, "wavelength", s.wavelength);
  wr.attr(ds, "medium_index", s.medium_index);
  wr.attr(ds, "plane", -s.defocus);
}

void set_common_attrs(const H5Writer& wr, hid_t ds, hid_t file, const DemoScenario& s, const std::string& what) {
  const double d = pitch_of(s);
  wr.attr(ds, "description", what);
  wr.attr(ds, "units", std::string("DN"));
  wr.attr_int(ds, "bit_depth", s.bit_depth);
  wr.attr_int(ds, "full_scale", (1 << s.bit_depth) - 1);
  wr.attr(ds, "wavelength", s.wavelength);
  wr.attr(ds, "camera_pixel_pitch", std::vector<double>{s.camera_pitch, s.camera_pitch});
  wr.attr(ds, "object_pixel_pitch", std::vector<double>{d, d});
  wr.attr(ds, "magnification", s.magnification);
  wr.attr(ds, "numerical_aperture", s.numerical_aperture);
  wr.attr(ds, "medium_index", s.medium_index);
  wr.attr(ds, "carrier_frequency", std::vector<double>{s.carrier_fy, s.carrier_fx});
  wr.attr(ds, "truth_defocus", s.defocus);
  // the recording model, so that the data can be re-synthesised
  wr.attr(ds, "reference_ratio", s.reference_ratio);
  wr.attr(ds, "mean_level", s.mean_level);
  wr.attr(ds, "vignetting", s.vignetting);
  wr.attr(ds, "illumination_centre", std::vector<double>{illumination_centre_y, illumination_centre_x});
  wr.attr(ds, "full_well", s.full_well);
  wr.attr(ds, "read_noise", s.read_noise);
  wr.attr_int(ds, "noise", s.noise ? 1 : 0);
  wr.attr(ds, "truth_refocus_distance", -s.defocus);
  wr.attr(ds, "attribute_units",
          std::string("lengths in m (wavelength in vacuum, pixel pitches [dy, dx]), carrier_frequency "
                      "[fy, fx] in cycles/m in object space; truth_defocus: the recorded plane lies this "
                      "far beyond the objects' focal plane; truth_refocus_distance: the propagate distance "
                      "that brings the objects into focus"));
  wr.attr(file, "generator", std::string("wavestack demo generator (datasets-demo/generator)"));
  wr.attr(file, "scene", std::string("cells and polystyrene beads in water, see datasets-demo/README.md"));
  wr.attr_int(file, "seed", static_cast<long long>(s.seed));
}

} // namespace

// ---------------------------------------------------------------------------
// default scene
// ---------------------------------------------------------------------------

namespace {
constexpr double default_fov = 1024 * 3.45e-6 / 40.0; // 88.32 µm
constexpr double um_ = 1e-6;
} // namespace

std::vector<DemoCell> default_cells(double fov_y, double fov_x) {
  const double k = std::min({1.0, fov_y / default_fov, fov_x / default_fov}); // shrink only
  // {y, x} as fractions of the field of view; sizes in µm; drift in µm/frame.
  struct Row {
    const char* label;
    double fy, fx, vy, vx, a, b, angle, h, dn, ndy, ndx, na, nb, nt, ndn;
  };
  // Cytoplasm Δn 0.025–0.038 over the medium, nucleus +0.012–0.018: the
  // usual range for adherent cells in quantitative phase imaging [common
  // practice; from memory]. Peak phases stay below π, so the demo needs no
  // unwrapping.
  static const Row rows[] = {
      {"A", 0.34, 0.32, +0.12, +0.20, 9.0, 6.5, 0.5, 4.5, 0.030, 0.8, -1.2, 3.2, 2.6, 3.0, 0.015},
      {"B", 0.66, 0.70, -0.15, +0.10, 11.0, 7.5, -0.8, 5.0, 0.025, -1.5, 1.0, 3.8, 3.0, 3.4, 0.012},
      {"C", 0.73, 0.27, +0.05, +0.18, 7.0, 6.0, 0.2, 4.0, 0.035, 0.5, 0.5, 2.6, 2.4, 2.6, 0.018},
      {"D", 0.29, 0.75, +0.10, -0.12, 8.0, 5.0, 1.2, 3.5, 0.038, -0.6, 0.9, 2.4, 2.0, 2.2, 0.016},
  };
  std::vector<DemoCell> out;
  for (const Row& r : rows) {
    DemoCell c;
    c.label = r.label;
    c.y = r.fy * fov_y;
    c.x = r.fx * fov_x;
    c.vy = r.vy * um_ * k;
    c.vx = r.vx * um_ * k;
    c.semi_a = r.a * um_ * k;
    c.semi_b = r.b * um_ * k;
    c.angle = r.angle;
    c.height = r.h * um_ * k;
    c.delta_n = r.dn;
    c.kappa = 0.0;
    c.nucleus_dy = r.ndy * um_ * k;
    c.nucleus_dx = r.ndx * um_ * k;
    c.nucleus_a = r.na * um_ * k;
    c.nucleus_b = r.nb * um_ * k;
    c.nucleus_thickness = r.nt * um_ * k;
    c.nucleus_delta_n = r.ndn;
    c.nucleus_kappa = 2e-4; // a faint absorption: amplitude ~0.994 through a 3 µm nucleus
    out.push_back(c);
  }
  return out;
}

std::vector<DemoBead> default_beads(double fov_y, double fov_x) {
  const double k = std::min({1.0, fov_y / default_fov, fov_x / default_fov});
  // Polystyrene 1.58753 at 632.8 nm (Sultanova et al., Acta Phys. Pol. A
  // 116(4) 585 (2009): measured 1.587, fit value [derived]) in water 1.33211
  // (Daimon & Masumura 2007) [derived]: Δn = 0.25542. A 1 µm bead peaks at
  // 4πRΔn/λ0 = 2.54 rad (< π: no wrapping). Small beads are outside the
  // projection approximation's strict validity (R ~ λ); the truth here is
  // defined by that approximation.
  struct Row {
    const char* label;
    double fy, fx, vy, vx;
  };
  static const Row rows[] = {
      {"b1", 0.17, 0.51, +0.22, +0.04}, {"b2", 0.51, 0.16, -0.05, +0.25}, {"b3", 0.50, 0.50, +0.18, -0.16},
      {"b4", 0.85, 0.54, -0.20, +0.08}, {"b5", 0.55, 0.88, +0.10, -0.24},
  };
  std::vector<DemoBead> out;
  for (const Row& r : rows) {
    DemoBead b;
    b.label = r.label;
    b.y = r.fy * fov_y;
    b.x = r.fx * fov_x;
    b.vy = r.vy * um_ * k;
    b.vx = r.vx * um_ * k;
    b.radius = 0.5 * um_ * k;
    b.delta_n = 1.58753 - 1.33211;
    out.push_back(b);
  }
  return out;
}

// ---------------------------------------------------------------------------

DemoSummary write_demo_data(const std::string& dir, const DemoScenario& s) {
  namespace fs = std::filesystem;
  validate(s);
  const double d = pitch_of(s);
  const double fov_y = static_cast<double>(s.height) * d, fov_x = static_cast<double>(s.width) * d;
  const Margins m = margins_of(s);
  const double rc = cutoff_of(s);
  if (!(m.gap > 0) || !(m.band_x > 0) || !(m.band_y > 0)) {
    std::ostringstream o;
    o << "demo scenario: the carrier (" << s.carrier_fy * 1e-6 << ", " << s.carrier_fx * 1e-6
      << ") um^-1 does not separate the orders: need |fc| >= 3 NA/lambda0 = " << 3 * rc * 1e-6
      << " um^-1 (have " << m.fc * 1e-6 << ") and |fc_axis| + NA/lambda0 below the Nyquist frequency "
      << m.nyq_x * 1e-6 << " um^-1";
    fail_config(o.str());
  }
  std::vector<DemoCell> cells = s.cells;
  std::vector<DemoBead> beads = s.beads;
  if (cells.empty() && beads.empty()) {
    cells = default_cells(fov_y, fov_x);
    beads = default_beads(fov_y, fov_x);
  }
  check_edges(s, cells, beads);

  std::error_code ec;
  fs::create_directories(dir, ec);
  if (ec) fail_output("could not create the demo folder: " + ec.message(), where(dir));

  DemoSummary sum;
  sum.holograms_path = (fs::path(dir) / "holograms.h5").string();
  sum.background_path = (fs::path(dir) / "background.h5").string();
  if (s.write_truth) sum.truth_path = (fs::path(dir) / "truth.h5").string();
  sum.frames = s.frames;
  sum.height = s.height;
  sum.width = s.width;
  sum.wavelength = s.wavelength;
  sum.medium_index = s.medium_index;
  sum.numerical_aperture = s.numerical_aperture;
  sum.magnification = s.magnification;
  sum.camera_pitch = s.camera_pitch;
  sum.object_pitch = d;
  sum.defocus = s.defocus;
  sum.refocus_distance = -s.defocus;
  sum.carrier_fy = s.carrier_fy;
  sum.carrier_fx = s.carrier_fx;
  sum.carrier_bin_y = s.carrier_fy * fov_y;
  sum.carrier_bin_x = s.carrier_fx * fov_x;
  sum.cutoff = rc;
  sum.nyquist_y = m.nyq_y;
  sum.nyquist_x = m.nyq_x;
  sum.zero_order_gap = m.gap;
  sum.band_margin_y = m.band_y;
  sum.band_margin_x = m.band_x;

  H5Eset_auto2(H5E_DEFAULT, nullptr, nullptr);
  const Renderer ren(s, cells, beads);

  // jobs 0..N-1 are frames, job N the background; any thread count gives
  // the same bytes (per-job seeds, per-thread workspaces)
  const std::size_t jobs = s.frames + 1;
  std::vector<Image<std::uint16_t>> frames(s.frames), background(1);
  std::vector<Image<float>> truth_opd(s.write_truth ? s.frames : 0), truth_amp(truth_opd.size());
  std::vector<double> peaks;
  unsigned nthreads = s.threads ? s.threads : std::max(1u, std::thread::hardware_concurrency());
  nthreads = static_cast<unsigned>(std::min<std::size_t>(nthreads, jobs));
  std::atomic<std::size_t> next{0};
  std::exception_ptr failure;
  std::mutex failure_mutex;
  const auto worker = [&] {
    try {
      auto ws = ren.make_workspace();
      for (std::size_t j = next++; j < jobs; j = next++) {
        if (j < s.frames)
          ren.render(j, true, ws, frames[j], j == 0 ? &peaks : nullptr, s.write_truth ? &truth_opd[j] : nullptr,
                     s.write_truth ? &truth_amp[j] : nullptr);
        else
          ren.render(0, false, ws, background[0], nullptr, nullptr, nullptr);
      }
    } catch (...) {
      std::lock_guard<std::mutex> lock(failure_mutex);
      if (!failure) failure = std::current_exception();
      next = jobs;
    }
  };
  std::vector<std::thread> pool;
  for (unsigned i = 1; i < nthreads; ++i) pool.emplace_back(worker);
  worker();
  for (auto& t : pool) t.join();
  if (failure) std::rethrow_exception(failure);

  // statistics
  const int fs_dn = ren.full_scale();
  double total = 0;
  std::size_t clipped = 0;
  for (const auto& f : frames)
    for (std::uint16_t v : f) {
      total += v;
      clipped += (v == 0 || v == fs_dn);
    }
  const double npx = static_cast<double>(s.frames * s.height * s.width);
  sum.mean_counts = total / npx;
  sum.clipped_fraction = static_cast<double>(clipped) / npx;

  std::size_t pi = 0;
  for (const auto& c : cells) {
    DemoObjectTruth t{"cell", c.label, c.y, c.x, c.vy, c.vx, c.semi_a, c.semi_b, c.delta_n, peaks[pi], 0};
    t.peak_phase = two_pi * t.peak_opd / s.wavelength;
    sum.objects.push_back(t);
    ++pi;
  }
  for (const auto& b : beads) {
    DemoObjectTruth t{"bead", b.label, b.y, b.x, b.vy, b.vx, b.radius, b.radius, b.delta_n, peaks[pi], 0};
    t.peak_phase = two_pi * t.peak_opd / s.wavelength;
    sum.objects.push_back(t);
    ++pi;
  }

  // files
  std::ostringstream what;
  what << "demo off-axis holograms: " << cells.size() << " cells and " << beads.size()
       << " polystyrene beads in water, defocused by " << um(s.defocus, 2) << " um, "
       << s.frames << " frames; 40x/0.75 NA demo microscope at 632.8 nm";
  write_file(sum.holograms_path, [&](H5Writer& wr, hid_t file) {
    Hid ds = write_dataset(wr, file, "/holograms", frames, H5T_STD_U16LE, H5T_NATIVE_UINT16);
    set_common_attrs(wr, ds.get(), file, s, what.str());
  });
  write_file(sum.background_path, [&](H5Writer& wr, hid_t file) {
    Hid ds = write_dataset(wr, file, "/holograms", background, H5T_STD_U16LE, H5T_NATIVE_UINT16);
    set_common_attrs(wr, ds.get(), file, s,
                     "demo object-free hologram: same reference, illumination and scale as holograms.h5, "
                     "no objects, its own noise");
  });
  if (s.write_truth)
    write_file(sum.truth_path, [&](H5Writer& wr, hid_t file) {
      {
        Hid ds = write_dataset(wr, file, "/opd", truth_opd, H5T_IEEE_F32LE, H5T_NATIVE_FLOAT);
        wr.attr(ds.get(), "description",
                std::string("truth of the demo: optical path difference at focus in the projection "
                            "approximation, before the objective pupil, on the hologram grid"));
        wr.attr(ds.get(), "units", std::string("nm"));
        set_truth_attrs(wr, ds.get(), s);
      }
      Hid ds = write_dataset(wr, file, "/amplitude", truth_amp, H5T_IEEE_F32LE, H5T_NATIVE_FLOAT);
      wr.attr(ds.get(), "description",
              std::string("truth of the demo: amplitude transmission at focus, before the objective pupil"));
      wr.attr(ds.get(), "units", std::string("1"));
      set_truth_attrs(wr, ds.get(), s);
      wr.attr(file, "generator", std::string("wavestack demo generator (datasets-demo/generator)"));
    });
  return sum;
}

std::string describe(const DemoSummary& s) {
  std::ostringstream o;
  char buf[256];
  o << "demo holograms:  " << s.holograms_path << ":" << s.dataset << "  (" << s.frames << " x " << s.height
    << " x " << s.width << " uint16, 12 bit)\n";
  o << "background:      " << s.background_path << ":" << s.dataset << "\n";
  if (!s.truth_path.empty()) o << "truth:           " << s.truth_path << ":/opd\n";
  std::snprintf(buf, sizeof buf,
                "instrument:      %.1f nm, %.0fx / %.2f NA, camera pitch %.2f um -> %.2f nm in the sample, "
                "medium n = %.5f\n",
                s.wavelength * 1e9, s.magnification, s.numerical_aperture, s.camera_pitch * 1e6,
                s.object_pitch * 1e9, s.medium_index);
  o << buf;
  std::snprintf(buf, sizeof buf,
                "carrier:         (fy, fx) = (%.3f, %.3f) um^-1 = bins (%.2f, %.2f); |fc| = %.2f NA/lambda0, "
                "zero-order gap %.3f um^-1, band margins (%.3f, %.3f) um^-1\n",
                s.carrier_fy * 1e-6, s.carrier_fx * 1e-6, s.carrier_bin_y, s.carrier_bin_x,
                std::hypot(s.carrier_fy, s.carrier_fx) / s.cutoff, s.zero_order_gap * 1e-6,
                s.band_margin_y * 1e-6, s.band_margin_x * 1e-6);
  o << buf;
  std::snprintf(buf, sizeof buf, "recording:       mean %.0f DN, clipped pixels %.4f %%\n", s.mean_counts,
                100.0 * s.clipped_fraction);
  o << buf;
  std::snprintf(buf, sizeof buf,
                "truth:           objects in focus at %+.2f um from the hologram plane: propagate distance "
                "= \"%.0f um\"\n",
                -s.defocus * 1e6, s.refocus_distance * 1e6);
  o << buf;
  o << "  object     y0 um    x0 um   (row, col)     drift um/frame   size um        dn      peak OPD nm  "
       "peak phase rad\n";
  for (const auto& t : s.objects) {
    std::snprintf(buf, sizeof buf,
                  "  %-4s %-3s %8.2f %8.2f  (%6.1f, %6.1f)  (%+.2f, %+.2f)   %5.2f x %5.2f  %.5f  %8.1f      %.3f\n",
                  t.kind.c_str(), t.label.c_str(), t.y * 1e6, t.x * 1e6, t.y / s.object_pitch,
                  t.x / s.object_pitch, t.vy * 1e6, t.vx * 1e6, t.size_a * 1e6, t.size_b * 1e6, t.delta_n,
                  t.peak_opd * 1e9, t.peak_phase);
    o << buf;
  }
  return o.str();
}

} // namespace wavestack::demo
