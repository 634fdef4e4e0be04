#pragma once
// Shared machinery of Search and ObjectFocuser: the transfer functions of
// the coarse planes and of the refinement offsets, the background handling,
// the parallel sweep and the dyadic refinement.
//
// Per plane the sweep does one pass over the padded array — spectrum × H
// over H's support (the quarter table of propagate::TransferFunction,
// mirrored on the fly) and zeros elsewhere, written into the slot's buffer —
// then one in-place inverse FFT, and the metric reads the top-left h×w
// corner of that buffer directly (no crop copy). The values are those of
// AngularSpectrum::apply_spectrum (same tables, products and plan).
#include "wavestack/core/error.hpp"
#include "wavestack/core/grid.hpp"
#include "wavestack/core/image.hpp"
#include "wavestack/fft/fft.hpp"
#include "wavestack/focus/metric.hpp"
#include "wavestack/focus/search.hpp"
#include "wavestack/propagate/transfer_function.hpp"

#include <tbb/blocked_range.h>
#include <tbb/parallel_for.h>
#include <tbb/parallel_invoke.h>
#include <tbb/task_arena.h>

#include <cmath>
#include <complex>
#include <cstddef>
#include <memory>
#include <string>
#include <vector>

namespace wavestack::focus::detail {

/// One thread's buffers.
struct Slot {
  Image<cfloat> buf;                ///< ph×pw: spectrum·H, then its inverse FFT in place
  ImageView<const cfloat> out;      ///< the propagated h×w field: top-left corner of buf
  MetricEvaluator::Scratch scratch; ///< metric scratch
  Image<float> map;                 ///< object focus: max-projection of |∇v|² (else empty)
};

struct EngineWorkspace {
  Image<cfloat> padded;   ///< ph×pw: field minus background in the top-left h×w corner, zeros elsewhere
  Image<cfloat> spectrum; ///< ph×pw forward spectrum, shared read-only by the plane tasks
  Image<cfloat> moved;    ///< ph×pw: spectrum moved to the refinement centre
  std::vector<Slot> slots;
  std::vector<double> row_sums; ///< h×3: per-row Σre, Σim, Σ|u|² of the field (prepare)
  cfloat background{0.0f, 0.0f};
  double rms = 0; ///< sqrt(mean |field|²)

  Slot& slot() {
    const int i = tbb::this_task_arena::current_thread_index();
    if (i < 0 || static_cast<std::size_t>(i) >= slots.size())
      fail_internal("focus: the workspace was made for " + std::to_string(slots.size()) +
                    " threads and is used from thread " + std::to_string(i) +
                    " of a larger task arena; make it in the arena that runs the search");
    return slots[static_cast<std::size_t>(i)];
  }
};

/// fn(a, b) over [first, end) in chunks of `grain`, on the current arena's
/// threads, in tbb::this_task_arena::isolate: a thread waiting for the loop
/// only picks up its chunks — never an outer task (e.g. another frame of a
/// pipeline) that could reuse the caller's workspace.
template <class Fn> void on_ranges(std::size_t first, std::size_t end, std::size_t grain, Fn&& fn) {
  tbb::this_task_arena::isolate([&] {
    tbb::parallel_for(tbb::blocked_range<std::size_t>(first, end, grain),
                      [&](const tbb::blocked_range<std::size_t>& r) { fn(r.begin(), r.end()); });
  });
}
/// fn(y) for every row y < n, in chunks of 32 rows.
template <class Fn> void on_rows(std::size_t n, Fn&& fn) {
  on_ranges(0, n, 32, [&](std::size_t a, std::size_t b) {
    for (std::size_t y = a; y < b; ++y) fn(y);
  });
}

/// Result of the refinement.
struct Refined {
  double distance = 0;
  std::size_t evaluations = 0;
};

class Engine {
public:
  Engine(std::size_t h, std::size_t w, const Grid& grid, double from, double to, double step, double pad_factor,
         bool band_limit, Background background, int refine_levels);

  std::size_t h, w, ph = 0, pw = 0;
  Grid grid;
  double step;
  Background background;
  int levels;
  std::vector<double> distances;
  using Transfer = std::shared_ptr<const propagate::TransferFunction>;
  std::vector<Transfer> planes;  ///< from the shared cache (propagate::cached_transfer)
  std::vector<Transfer> offsets; ///< [2j] = -step/2^(j+1), [2j+1] = +step/2^(j+1)
  std::shared_ptr<const fft::PaddedC2C> fwd; ///< forward of the zero-padded field, on all threads
  std::shared_ptr<const fft::C2C> inv;       ///< backward, in place

  /// One workspace with `threads` slots (0 = the current arena's concurrency);
  /// `map` adds the object-focus max-projection buffer to each slot.
  EngineWorkspace make_workspace(const MetricEvaluator& ev, bool map, std::size_t threads = 0) const;

  /// Subtract the background and compute the forward spectrum.
  void prepare(ImageView<const cfloat> field, EngineWorkspace& ws) const;

  /// Background at distance z: b·exp(i 2π n z/λ0).
  cfloat background_at(const EngineWorkspace& ws, double z) const {
    const double ph_ = grid.wavenumber() * z;
    const std::complex<double> b(ws.background.real(), ws.background.imag());
    const std::complex<double> v = b * std::complex<double>(std::cos(ph_), std::sin(ph_));
    return cfloat(static_cast<float>(v.real()), static_cast<float>(v.imag()));
  }

  /// Propagate planes [a, b] in parallel (isolated, see on_ranges);
  /// fn(i, slot, bz) is called with slot.out holding the field of plane i
  /// and bz its background.
  template <class Fn> void sweep(std::size_t a, std::size_t b, EngineWorkspace& ws, Fn&& fn) const {
    on_ranges(a, b + 1, 1, [&](std::size_t first, std::size_t end) {
      Slot& s = ws.slot();
      for (std::size_t i = first; i != end; ++i) {
        propagate(*planes[i], ws.spectrum, s);
        fn(i, s, background_at(ws, distances[i]));
      }
    });
  }

  /// Refine around coarse plane i (0 < i < S-1) maximising sign·f, with
  /// f_l, f_c, f_r the curve at planes i-1, i, i+1 and eval(slot, bz) the
  /// metric of slot.out. Uses ws.moved. See search.hpp for the method.
  template <class Eval>
  Refined refine(std::size_t i, int sign, double fl, double fc, double fr, EngineWorkspace& ws, Eval&& eval) const {
    Refined res;
    double c = distances[i], hstep = step; // bracket: c ± hstep
    fl *= sign;
    fc *= sign;
    fr *= sign;
    if (levels > 0) move_spectrum(ws, *planes[i], true);
    for (int j = 0; j < levels; ++j) {
      const double hh = hstep / 2;
      const propagate::TransferFunction& om = *offsets[2 * j];
      const propagate::TransferFunction& op = *offsets[2 * j + 1];
      double fm = 0, fp = 0;
      tbb::this_task_arena::isolate([&] {
        tbb::parallel_invoke(
            [&] {
              Slot& s = ws.slot();
              propagate(om, ws.moved, s);
              fm = sign * eval(s, background_at(ws, c - hh));
            },
            [&] {
              Slot& s = ws.slot();
              propagate(op, ws.moved, s);
              fp = sign * eval(s, background_at(ws, c + hh));
            });
      });
      res.evaluations += 2;
      // NaN never wins a comparison, so a NaN evaluation keeps the centre.
      const bool last = j + 1 == levels;
      if (fm > fc && fm >= fp) {
        fr = fc;
        fc = fm;
        c -= hh;
        if (!last) move_spectrum(ws, om, false);
      } else if (fp > fc) {
        fl = fc;
        fc = fp;
        c += hh;
        if (!last) move_spectrum(ws, op, false);
      } else {
        fl = fm;
        fr = fp;
      }
      hstep = hh;
    }
    // Parabola through (c - hstep, c, c + hstep); fc >= fl, fr keeps the
    // vertex within ±hstep/2.
    const double den = fl - 2 * fc + fr;
    double delta = 0;
    if (std::isfinite(den) && den < 0) delta = 0.5 * hstep * (fl - fr) / den;
    if (!(std::abs(delta) <= 0.5 * hstep)) delta = 0;
    res.distance = c + delta;
    return res;
  }

  /// s.buf = spectrum · t (t's support, zeros elsewhere), then the inverse
  /// FFT in place: s.out holds the propagated field.
  void propagate(const propagate::TransferFunction& t, const Image<cfloat>& spectrum, Slot& s) const;

private:
  /// moved = (from_spectrum ? spectrum : moved) · t · (ph·pw) (t = H/(ph·pw)).
  void move_spectrum(EngineWorkspace& ws, const propagate::TransferFunction& t, bool from_spectrum) const;
};

} // namespace wavestack::focus::detail
