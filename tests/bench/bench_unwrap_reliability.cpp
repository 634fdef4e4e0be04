// Benchmark: reliability-sorting unwrapping of one noisy frame, wavestack
// against scikit-image's skimage.restoration.unwrap_phase (same algorithm
// family, Herráez et al., Appl. Opt. 41(35) 7437 (2002)) on the same input,
// measured in the same run.
//
//   bench_unwrap_reliability [SIZE=1024] [REPEATS=5]
//
// The frame is invented: tilted paraboloid + Gaussian bumps (about 120 rad
// peak-to-valley) + Gaussian noise of 0.3 rad, wrapped. The C++ time is the
// best of REPEATS calls of ReliabilityUnwrapper::apply with a workspace made
// beforehand; the scikit-image time is the best of 3 calls, measured by
// bench_unwrap_reliability.py (next to this file) under /usr/bin/python3.
// The program prints both, their ratio (target: scikit-image / wavestack
// >= 3) and how many pixels the two results share up to one 2π·k constant.
// It asserts nothing about time.
#include "../unwrap/unwrap_test_util.hpp"

#include "wavestack/unwrap/reliability.hpp"

#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <string>

using namespace wavestack;

int main(int argc, char** argv) {
  const std::size_t n = argc > 1 ? std::strtoul(argv[1], nullptr, 10) : 1024;
  const int repeats = argc > 2 ? std::atoi(argv[2]) : 5;
  if (n < 8 || repeats < 1) {
    std::fprintf(stderr, "usage: bench_unwrap_reliability [SIZE>=8] [REPEATS>=1]\n");
    return 2;
  }

  Image<float> truth = unwrap_test::synthetic_surface(n, n, 120.0);
  unwrap_test::add_noise(truth, 0.3, 7);
  const Image<float> wr = unwrap_test::wrapped(truth);

  unwrap::ReliabilityUnwrapper unwrapper(n, n);
  auto ws = unwrapper.make_workspace();
  Image<float> out(n, n);
  double best = 1e300;
  unwrap::ReliabilityStats st;
  for (int r = 0; r < repeats + 1; ++r) { // first call warms the caches
    const auto t0 = std::chrono::steady_clock::now();
    st = unwrapper.apply(wr.view(), out.view(), ws);
    const double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    if (r > 0) best = std::min(best, s);
  }

  const std::string in_path = unwrap_test::temp_path("bench_in");
  const std::string out_path = unwrap_test::temp_path("bench_out");
  unwrap_test::TempFiles cleanup{{in_path, out_path}};
  unwrap_test::write_raw<float>(in_path, wr.view());
  const std::string script = (std::filesystem::path(__FILE__).parent_path() / "bench_unwrap_reliability.py").string();
  const std::string cmd = "/usr/bin/python3 " + unwrap_test::quoted(script) + " " + unwrap_test::quoted(in_path) +
                          " " + unwrap_test::quoted(out_path) + " " + std::to_string(n) + " " +
                          std::to_string(n) + " 3";
  FILE* pipe = popen(cmd.c_str(), "r");
  double sk = -1;
  if (pipe) {
    char line[256];
    while (std::fgets(line, sizeof line, pipe))
      if (std::sscanf(line, "skimage_seconds %lf", &sk) == 1) break;
    pclose(pipe);
  }

  std::printf("frame %zux%zu, %zu edges, %zu group(s)\n", n, n, st.edges, st.groups);
  std::printf("wavestack reliability unwrap: best of %d  %8.2f ms\n", repeats, best * 1e3);
  if (sk < 0) {
    std::printf("scikit-image timing failed (is /usr/bin/python3 with scikit-image installed?)\n");
    return 1;
  }
  std::printf("skimage.restoration.unwrap_phase: best of 3  %8.2f ms\n", sk * 1e3);
  std::printf("ratio scikit-image / wavestack: %.2f  (target >= 3)\n", sk / best);

  const Image<float> ref = unwrap_test::read_raw<float>(out_path, n, n);
  if (!ref.empty()) {
    const auto ag = unwrap_test::compare_up_to_constant(out.view(), ref.view(), 1e-3);
    const auto tr = unwrap_test::compare_up_to_constant(out.view(), truth.view(), 1e-3);
    std::printf("pixels equal to scikit-image's result up to 2pi*%.0f: %.4f%%\n", ag.cycles, 100.0 * ag.fraction());
    std::printf("error vs the noisy truth (rms, up to a constant): %.2e rad\n", tr.rms_error);
  }
  return 0;
}
