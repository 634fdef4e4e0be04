// demo_smoke DIR [--frames N] [--size S] [--threads T] [--no-noise] [--truth]
// Writes the demo data into DIR and prints the summary and the time taken.
// A developer tool for the generator; `wavestack demo` is the user's way.
#include "wavestack/core/error.hpp"
#include "wavestack/demo/generator.hpp"

#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <string>

int main(int argc, char** argv) {
  if (argc < 2) {
    std::fprintf(stderr, "usage: demo_smoke DIR [--frames N] [--size S] [--threads T] [--no-noise] [--truth]\n");
    return 2;
  }
  wavestack::demo::DemoScenario s;
  const std::string dir = argv[1];
  for (int i = 2; i < argc; ++i) {
    const std::string a = argv[i];
    const bool has_value = i + 1 < argc;
    if (a == "--frames" && has_value) s.frames = std::strtoul(argv[++i], nullptr, 10);
    else if (a == "--size" && has_value) s.height = s.width = std::strtoul(argv[++i], nullptr, 10);
    else if (a == "--threads" && has_value) s.threads = static_cast<unsigned>(std::strtoul(argv[++i], nullptr, 10));
    else if (a == "--no-noise") s.noise = false;
    else if (a == "--truth") s.write_truth = true;
    else {
      std::fprintf(stderr, "demo_smoke: unknown argument %s\n", a.c_str());
      return 2;
    }
  }
  try {
    const auto t0 = std::chrono::steady_clock::now();
    const auto summary = wavestack::demo::write_demo_data(dir, s);
    const double sec = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    std::printf("%s", wavestack::demo::describe(summary).c_str());
    std::printf("written in %.2f s\n", sec);
    return 0;
  } catch (const wavestack::Error& e) {
    std::fprintf(stderr, "demo_smoke: %s\n", e.what());
    return e.exit_code();
  }
}
