// Per-frame cost of the wavefront module on S×S float phase maps.
//
// Reports ratios measured in one run (nothing here asserts a time):
//  * planned fit: ZernikeFit::fit with the basis sampled and orthonormalised
//    once, against re-planning per frame (construct + fit) — what the
//    precomputed QR saves;
//  * report: WavefrontAnalyzer::analyze (fit + PV/RMS/Strehl passes) over
//    the planned fit alone;
//  * background: BackgroundCompensator::apply (automatic detection, 3
//    passes, degree 2) and with a given mask, against one frame copy;
//  * 2 threads against 1 for fits over a batch of frames (one workspace per
//    thread; the ratio is the speed-up).
//
// usage: bench_wavefront_fit [--size S] [--terms J] [--frames N]
#include "wavestack/core/image.hpp"
#include "wavestack/wavefront/background.hpp"
#include "wavestack/wavefront/report.hpp"
#include "wavestack/wavefront/zernike_fit.hpp"

#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <random>
#include <string>
#include <thread>
#include <vector>

using namespace wavestack;
using namespace wavestack::wavefront;

namespace {

double seconds_since(std::chrono::steady_clock::time_point t0) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
}

template <class F> double per_call(int n, F&& f) {
  f(); // warm-up
  const auto t0 = std::chrono::steady_clock::now();
  for (int i = 0; i < n; ++i) f();
  return seconds_since(t0) / n;
}

} // namespace

int main(int argc, char** argv) {
  std::size_t S = 512;
  int J = 15, frames = 20;
  for (int i = 1; i + 1 < argc; i += 2) {
    const std::string a = argv[i];
    if (a == "--size") S = static_cast<std::size_t>(std::atoi(argv[i + 1]));
    else if (a == "--terms") J = std::atoi(argv[i + 1]);
    else if (a == "--frames") frames = std::atoi(argv[i + 1]);
    else {
      std::fprintf(stderr, "usage: bench_wavefront_fit [--size S] [--terms J] [--frames N]\n");
      return 2;
    }
  }
  // Invented frame: smooth aberration + a few bumps + noise.
  Image<float> phase(S, S), out(S, S), copy(S, S);
  std::mt19937 rng(1);
  std::normal_distribution<double> noise(0, 0.02);
  for (std::size_t r = 0; r < S; ++r)
    for (std::size_t c = 0; c < S; ++c) {
      const double x = (c - S / 2.0) / S, y = (r - S / 2.0) / S;
      const double d = std::hypot(x - 0.2, y + 0.1);
      phase(r, c) = static_cast<float>(3 * x - 2 * y + 8 * (x * x + y * y) + (d < 0.08 ? 1.5 : 0.0) + noise(rng));
    }

  ZernikeFitOptions fo;
  fo.terms = J;
  const auto tp = std::chrono::steady_clock::now();
  ZernikeFit fit(S, S, fo);
  const double plan_s = seconds_since(tp);
  auto fws = fit.make_workspace();
  std::vector<double> c(static_cast<std::size_t>(J));
  const double t_fit = per_call(frames, [&] { fit.fit(phase.view(), c, fws); });
  const double t_replan = per_call(std::max(2, frames / 10), [&] {
    ZernikeFit f2(S, S, fo);
    auto w2 = f2.make_workspace();
    f2.fit(phase.view(), c, w2);
  });

  WavefrontOptions wo;
  wo.wavelength = 632.8e-9;
  wo.terms = J;
  WavefrontAnalyzer an(S, S, wo);
  auto aws = an.make_workspace();
  auto rep = an.make_report();
  const double t_report = per_call(frames, [&] { an.analyze(phase.view(), rep, aws); });

  BackgroundCompensator comp(S, S, {});
  auto bws = comp.make_workspace();
  std::vector<double> bc(static_cast<std::size_t>(comp.terms()));
  const double t_bg = per_call(frames, [&] { comp.apply(phase.view(), {}, out.view(), bc, bws); });
  BackgroundOptions mo;
  mo.region = BackgroundRegion::mask;
  mo.mask = bws.background; // the mask the automatic detection found
  BackgroundCompensator masked(S, S, mo);
  auto mws = masked.make_workspace();
  const double t_mask = per_call(frames, [&] { masked.apply(phase.view(), {}, out.view(), bc, mws); });
  const double t_copy = per_call(frames * 5, [&] { std::memcpy(copy.data(), phase.data(), S * S * sizeof(float)); });

  // 1 vs 2 threads over a batch of fits.
  const int batch = frames * 4;
  auto run_threads = [&](int nt) {
    const auto t0 = std::chrono::steady_clock::now();
    std::vector<std::thread> th;
    for (int t = 0; t < nt; ++t)
      th.emplace_back([&, t] {
        auto w = fit.make_workspace();
        std::vector<double> cc(static_cast<std::size_t>(J));
        for (int k = t; k < batch; k += nt) fit.fit(phase.view(), cc, w);
      });
    for (auto& t : th) t.join();
    return seconds_since(t0);
  };
  run_threads(1);
  const double t1 = run_threads(1), t2 = run_threads(2);

  std::printf("frame %zux%zu, J = %d, pupil %zu pixels, %d frames\n", S, S, J, fit.pupil_pixels(), frames);
  std::printf("plan (sample + Gram-Schmidt)     %9.3f ms\n", plan_s * 1e3);
  std::printf("fit per frame (planned)          %9.3f ms\n", t_fit * 1e3);
  std::printf("re-plan + fit per frame          %9.3f ms   ratio %.1f x\n", t_replan * 1e3, t_replan / t_fit);
  std::printf("report per frame                 %9.3f ms   ratio to fit %.2f\n", t_report * 1e3, t_report / t_fit);
  std::printf("frame copy                       %9.3f ms\n", t_copy * 1e3);
  std::printf("background, automatic (3 passes) %9.3f ms   ratio to copy %.0f\n", t_bg * 1e3, t_bg / t_copy);
  std::printf("background, given mask           %9.3f ms   ratio to copy %.0f, automatic/mask %.1f\n", t_mask * 1e3,
              t_mask / t_copy, t_bg / t_mask);
  std::printf("fits, 1 vs 2 threads             %9.3f / %.3f ms per frame   speed-up %.2f\n", t1 / batch * 1e3,
              t2 / batch * 1e3, t1 / t2);
  return 0;
}
