// Benchmark: one autofocus search (81-plane sweep from one forward spectrum
// + refinement) of a 512x512 field against the raw inverse FFTs it needs
// (81 + refinement count, at the padded size), measured in the same run, on
// 1 and 2 threads. Prints the ratios; asserts nothing about time.
//
// FFTW plans are made with Planning::measure, set before any plan exists,
// and every plan is made before the timing starts; the raw loop runs the
// very plan object the search uses (the in-place backward plan from the
// fft module's cache). Its buffer goes to inf/NaN after a few unnormalised
// transforms; FFTW's time does not depend on that (measured: finite, NaN
// and zero inputs within 1%). Also printed: the same number of bare
// AngularSpectrum::apply_spectrum calls (multiply, inverse FFT, crop), a
// sweep through the plain propagate API without any metric.
//
// The ratios use the best time of each part over the repeats; the median of
// the per-repeat ratios (search and FFTs timed back to back) is printed
// beside it, as it is steadier on a busy machine. 15 repeats by default: on
// a shared 2-core VM many 30-60 ms windows are slowed by neighbours, and
// the best of 5-7 still moved the ratio by ±0.05 between runs.
//
// The search time includes its one forward FFT (the padded plan, which runs
// on every thread of the arena) and the background sums; the denominator
// counts inverse FFTs only.
//
// The search runs with the library's defaults: tamura-gradient, noise split
// in 2 px blocks (split_block_for of a field cropped to its band, as the
// sideband stage crops it).
//
// Usage: bench_focus_sweep [repeats=15]
#include "focus_test_util.hpp"

#include "wavestack/fft/fft.hpp"
#include "wavestack/focus/search.hpp"
#include "wavestack/propagate/angular_spectrum.hpp"

#include <tbb/parallel_for.h>
#include <tbb/task_arena.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <vector>

using namespace wavestack;
using namespace wavestack::focus;
using Clock = std::chrono::steady_clock;

namespace {

double seconds(Clock::time_point a, Clock::time_point b) { return std::chrono::duration<double>(b - a).count(); }

} // namespace

int main(int argc, char** argv) {
  const int repeats = argc > 1 ? std::max(1, std::atoi(argv[1])) : 15;
  fft::set_planning(fft::Planning::measure);
  const std::size_t n = 512;

  // A 512x512 frame with three discs at different depths (invented data).
  std::vector<focus_test::Object> objects(3);
  objects[0] = {focus_test::Object::amplitude_disc, -20e-6, -25e-6, 2e-6, 0.5, 0.0, -6e-6};
  objects[1] = {focus_test::Object::phase_disc, 15e-6, 10e-6, 2.5e-6, 0.0, 1.0, 4e-6};
  objects[2] = {focus_test::Object::mixed_disc, 30e-6, -30e-6, 2e-6, 0.3, 1.0, 0.5e-6};
  const Image<cfloat> frame = focus_test::make_frame(n, n, objects, 0.02, 1);

  const Search search(n, n, focus_test::grid(), -20e-6, 20e-6, 0.5e-6);
  const std::size_t ph = search.padded_height(), pw = search.padded_width();
  std::printf("search: %zu planes, %zux%zu field, padded %zux%zu, refine levels %d\n", search.planes(), n, n, ph, pw,
              search.options().refine_levels);

  // The inverse transform AngularSpectrum uses (in-place, backward), planned now.
  const auto inv = fft::plan_c2c(ph, pw, fft::Direction::backward, true);
  // apply_spectrum alone (multiply by H, inverse FFT, crop) on one plane: the
  // floor of the sweep's cost through the propagate API.
  propagate::AngularSpectrumOptions po;
  po.pad_factor = search.options().pad_factor;
  const propagate::AngularSpectrum plane(n, n, focus_test::grid(), 5e-6, po);

  for (const int threads : {1, 2}) {
    tbb::task_arena arena(threads);
    arena.execute([&] {
      Search::Workspace ws = search.make_workspace();
      FocusResult r;
      search.run(frame, r, ws); // warm-up (first touch of every buffer)
      const std::size_t count = r.propagations;

      std::vector<Image<cfloat>> bufs;
      for (int k = 0; k < threads; ++k) bufs.emplace_back(ph, pw, cfloat(1.0f, 0.5f));
      auto raw_ffts = [&] {
        tbb::parallel_for(tbb::blocked_range<std::size_t>(0, count, 1), [&](const tbb::blocked_range<std::size_t>& rg) {
          const int t = std::max(0, tbb::this_task_arena::current_thread_index());
          Image<cfloat>& b = bufs[static_cast<std::size_t>(t) % bufs.size()];
          for (std::size_t i = rg.begin(); i != rg.end(); ++i) inv->execute(b.data(), b.data());
        });
      };
      raw_ffts(); // warm-up
      std::vector<propagate::AngularSpectrum::Workspace> pws;
      std::vector<Image<cfloat>> outs;
      for (int k = 0; k < threads; ++k) {
        pws.push_back(plane.make_workspace());
        outs.emplace_back(n, n);
      }
      Image<cfloat> spectrum = plane.make_spectrum();
      plane.forward_spectrum(frame, spectrum, pws.front());
      auto applies = [&] {
        tbb::parallel_for(tbb::blocked_range<std::size_t>(0, count, 1), [&](const tbb::blocked_range<std::size_t>& rg) {
          const std::size_t t = static_cast<std::size_t>(std::max(0, tbb::this_task_arena::current_thread_index()));
          for (std::size_t i = rg.begin(); i != rg.end(); ++i)
            plane.apply_spectrum(spectrum, outs[t % outs.size()], pws[t % pws.size()]);
        });
      };
      applies(); // warm-up

      double best_search = 1e30, best_fft = 1e30, best_apply = 1e30;
      std::vector<double> ratios;
      for (int rep = 0; rep < repeats; ++rep) {
        auto t0 = Clock::now();
        search.run(frame, r, ws);
        auto t1 = Clock::now();
        raw_ffts();
        auto t2 = Clock::now();
        applies();
        auto t3 = Clock::now();
        best_search = std::min(best_search, seconds(t0, t1));
        best_fft = std::min(best_fft, seconds(t1, t2));
        best_apply = std::min(best_apply, seconds(t2, t3));
        ratios.push_back(seconds(t0, t1) / seconds(t1, t2));
      }
      std::sort(ratios.begin(), ratios.end());
      const std::size_t m = ratios.size() / 2;
      const double median = ratios.size() % 2 ? ratios[m] : 0.5 * (ratios[m - 1] + ratios[m]);
      std::printf("threads %d: search %.1f ms (%zu inverse FFTs + 1 forward, focus %s %.3f um), raw inverse FFTs "
                  "%.1f ms, ratio %.3f (target <= 1.3; median of %d repeats %.3f); apply_spectrum alone x%zu: "
                  "%.1f ms, ratio %.3f\n",
                  threads, best_search * 1e3, count, r.sure ? "sure" : "UNSURE", r.distance * 1e6, best_fft * 1e3,
                  best_search / best_fft, repeats, median, count, best_apply * 1e3, best_apply / best_fft);
    });
  }
  return 0;
}
