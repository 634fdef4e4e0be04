// Benchmark: least-squares unwrapping of one noisy frame — the direct DCT
// solve (unweighted) against weighted PCG with phase-derivative-variance
// weights, and both against reliability sorting, measured in one run.
//
//   bench_unwrap_least_squares [SIZE=1024] [REPEATS=3]
//
// Invented frame: the one of bench_unwrap_reliability (tilted paraboloid +
// Gaussian bumps, 0.3 rad noise, wrapped). Prints the best time of each,
// the PCG iterations and the ratios. Asserts nothing about time.
#include "../unwrap/unwrap_test_util.hpp"

#include "wavestack/unwrap/least_squares.hpp"
#include "wavestack/unwrap/quality.hpp"
#include "wavestack/unwrap/reliability.hpp"

#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <functional>

using namespace wavestack;

namespace {
double best_of(int repeats, const std::function<void()>& f) {
  f(); // warm-up
  double best = 1e300;
  for (int r = 0; r < repeats; ++r) {
    const auto t0 = std::chrono::steady_clock::now();
    f();
    best = std::min(best, std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count());
  }
  return best;
}
} // namespace

int main(int argc, char** argv) {
  const std::size_t n = argc > 1 ? std::strtoul(argv[1], nullptr, 10) : 1024;
  const int repeats = argc > 2 ? std::atoi(argv[2]) : 3;
  if (n < 8 || repeats < 1) {
    std::fprintf(stderr, "usage: bench_unwrap_least_squares [SIZE>=8] [REPEATS>=1]\n");
    return 2;
  }
  Image<float> truth = unwrap_test::synthetic_surface(n, n, 120.0);
  unwrap_test::add_noise(truth, 0.3, 7);
  const Image<float> wr = unwrap_test::wrapped(truth);
  Image<float> out(n, n), weights(n, n);

  unwrap::LeastSquaresUnwrapper ls(n, n);
  auto ws = ls.make_workspace();
  unwrap::ReliabilityUnwrapper rel(n, n);
  auto rws = rel.make_workspace();
  unwrap::LeastSquaresStats st;

  const double t_rel = best_of(repeats, [&] { rel.apply(wr.view(), out.view(), rws); });
  const double t_direct = best_of(repeats, [&] { ls.apply(wr.view(), out.view(), ws); });
  const double t_pdv = best_of(repeats, [&] { unwrap::derivative_variance_weights(wr.view(), weights.view()); });
  const double t_pcg = best_of(repeats, [&] { st = ls.apply(wr.view(), weights.view(), out.view(), ws); });

  std::printf("frame %zux%zu\n", n, n);
  std::printf("reliability sorting:                  %8.2f ms\n", t_rel * 1e3);
  std::printf("least squares, direct DCT:            %8.2f ms\n", t_direct * 1e3);
  std::printf("phase-derivative-variance weights:    %8.2f ms\n", t_pdv * 1e3);
  std::printf("least squares, weighted PCG:          %8.2f ms  (%d iterations, residual %.1e)\n", t_pcg * 1e3,
              st.iterations, st.relative_residual);
  std::printf("ratio PCG / direct: %.1f; per PCG iteration / direct: %.2f; direct / reliability: %.2f\n",
              t_pcg / t_direct, t_pcg / t_direct / std::max(1, st.iterations), t_direct / t_rel);

  // Iterations and change of the result against the tolerance (one run
  // each; the change is the RMS difference to the tightest solution).
  std::printf("tolerance  iterations  time(ms)  rms change vs 1e-6 (rad)\n");
  Image<float> tight(n, n);
  for (double tol : {1e-6, 1e-5, 1e-4, 1e-3}) {
    unwrap::LeastSquaresOptions opt;
    opt.tolerance = tol;
    opt.max_iterations = 500;
    unwrap::LeastSquaresUnwrapper lt(n, n, opt);
    const auto t0 = std::chrono::steady_clock::now();
    st = lt.apply(wr.view(), weights.view(), tol == 1e-6 ? tight.view() : out.view(), ws);
    const double t = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    const double change = tol == 1e-6 ? 0.0 : unwrap_test::compare_up_to_constant(out.view(), tight.view(), 0).rms_error;
    std::printf("%9.0e  %10d  %8.1f  %.2e\n", tol, st.iterations, t * 1e3, change);
  }
  return 0;
}
