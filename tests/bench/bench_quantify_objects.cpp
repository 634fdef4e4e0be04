// Per-frame cost of object analysis (segmentation + table) on an S×S OPD map
// with a few dozen cells.
//
// Reports ratios measured in one run (nothing here asserts a time): the
// analysis against one frame copy, the OPD conversion against the copy,
// Otsu against the robust threshold, hole filling on against off, and 2
// threads against 1 over a batch of frames (one workspace per thread).
//
// usage: bench_quantify_objects [--size S] [--frames N]
#include "wavestack/core/image.hpp"
#include "wavestack/quantify/convert.hpp"
#include "wavestack/quantify/objects.hpp"

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
using namespace wavestack::quantify;

namespace {

double seconds_since(std::chrono::steady_clock::time_point t0) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
}

template <class F> double per_call(int n, F&& f) {
  f();
  const auto t0 = std::chrono::steady_clock::now();
  for (int i = 0; i < n; ++i) f();
  return seconds_since(t0) / n;
}

} // namespace

int main(int argc, char** argv) {
  std::size_t S = 1024;
  int frames = 10;
  for (int i = 1; i + 1 < argc; i += 2) {
    const std::string a = argv[i];
    if (a == "--size") S = static_cast<std::size_t>(std::atoi(argv[i + 1]));
    else if (a == "--frames") frames = std::atoi(argv[i + 1]);
    else {
      std::fprintf(stderr, "usage: bench_quantify_objects [--size S] [--frames N]\n");
      return 2;
    }
  }
  // Invented frame: 40 ellipsoidal cells (peak 50–200 nm), 1 nm noise.
  Image<float> opd(S, S, 0.0f), copy(S, S), out(S, S);
  std::mt19937 rng(3);
  std::uniform_real_distribution<double> u(0, 1);
  struct Cell {
    double c, r, a, b, peak;
  };
  std::vector<Cell> cells;
  for (int k = 0; k < 40; ++k)
    cells.push_back({u(rng) * S, u(rng) * S, 10 + 30 * u(rng), 10 + 30 * u(rng), 50 + 150 * u(rng)});
  std::normal_distribution<double> noise(0, 1.0);
  for (std::size_t r = 0; r < S; ++r)
    for (std::size_t c = 0; c < S; ++c) {
      double v = noise(rng);
      for (const Cell& k : cells) {
        const double x = (c - k.c) / k.a, y = (r - k.r) / k.b, q = 1 - x * x - y * y;
        if (q > 0) v += k.peak * std::sqrt(q);
      }
      opd(r, c) = static_cast<float>(v);
    }
  Grid g;
  g.dx = g.dy = 0.1e-6;
  ObjectAnalyzer robust(S, S, g, {});
  ObjectOptions oo;
  oo.threshold = ThresholdMode::otsu;
  ObjectAnalyzer otsu(S, S, g, oo);
  ObjectOptions fo;
  fo.fill_holes = true;
  ObjectAnalyzer filled(S, S, g, fo);
  auto ws = robust.make_workspace();
  ObjectTable t;
  const double t_robust = per_call(frames, [&] { robust.analyze(opd.view(), t, ws); });
  const std::size_t found = t.objects.size();
  const double t_otsu = per_call(frames, [&] { otsu.analyze(opd.view(), t, ws); });
  const double t_fill = per_call(frames, [&] { filled.analyze(opd.view(), t, ws); });
  const double t_copy = per_call(frames * 5, [&] { std::memcpy(copy.data(), opd.data(), S * S * sizeof(float)); });
  ConversionOptions co;
  co.wavelength = 632.8e-9;
  PhaseConverter conv(co);
  const double t_conv = per_call(frames * 5, [&] { conv.apply(opd.view(), out.view()); });

  const int batch = frames * 4;
  auto run_threads = [&](int nt) {
    const auto t0 = std::chrono::steady_clock::now();
    std::vector<std::thread> th;
    for (int k = 0; k < nt; ++k)
      th.emplace_back([&, k] {
        auto w = robust.make_workspace();
        ObjectTable tt;
        for (int f = k; f < batch; f += nt) robust.analyze(opd.view(), tt, w);
      });
    for (auto& x : th) x.join();
    return seconds_since(t0);
  };
  run_threads(1);
  const double t1 = run_threads(1), t2 = run_threads(2);

  std::printf("frame %zux%zu, %zu objects found, %d frames\n", S, S, found, frames);
  std::printf("frame copy                  %9.3f ms\n", t_copy * 1e3);
  std::printf("phase -> OPD                %9.3f ms   ratio to copy %.1f\n", t_conv * 1e3, t_conv / t_copy);
  std::printf("objects, robust threshold   %9.3f ms   ratio to copy %.0f\n", t_robust * 1e3, t_robust / t_copy);
  std::printf("objects, Otsu threshold     %9.3f ms   ratio to robust %.2f\n", t_otsu * 1e3, t_otsu / t_robust);
  std::printf("objects, hole filling on    %9.3f ms   ratio to robust %.2f\n", t_fill * 1e3, t_fill / t_robust);
  std::printf("1 vs 2 threads              %9.3f / %.3f ms per frame   speed-up %.2f\n", t1 / batch * 1e3,
              t2 / batch * 1e3, t1 / t2);
  return 0;
}
