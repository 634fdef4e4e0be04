// Benchmark of the demo pipeline shape (fringe -> sideband -> propagate at a
// fixed distance) on a stack of 2048x2048 uint16 off-axis holograms.
//
// Reports, measured in one run: frames per second of `Engine::run`, the time
// of the raw FFT executions the same frames need (r2c of the hologram, the
// inverse FFT of the sideband crop, forward and inverse FFT of the padded
// field), run in parallel over frames on the same threads, their ratio
// (target <= 2), the CPU use of the run (both cores busy = close to 2.0
// cores), and the peak resident memory. Nothing here asserts a time.
//
// usage: bench_pipeline_throughput [--frames N] [--size S] [--threads T] [--repeats R=3] [--dir DIR]
// For the memory check run it with --frames 20 and --frames 200 and
// --repeats 1 (a second run in the same process raises the peak) and
// compare the "peak RSS" lines (tests/bench/run-memory-check.sh does that).
#include "wavestack/core/error.hpp"
#include "wavestack/core/log.hpp"
#include "wavestack/fft/fft.hpp"
#include "wavestack/io/frame_source.hpp"
#include "wavestack/io/stack_writer.hpp"
#include "wavestack/pipeline/config.hpp"
#include "wavestack/pipeline/engine.hpp"
#include "wavestack/propagate/propagator.hpp"

#include <tbb/enumerable_thread_specific.h>
#include <tbb/global_control.h>
#include <tbb/info.h>
#include <tbb/parallel_for.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <vector>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <string>
#include <malloc.h>
#include <sys/resource.h>

using namespace wavestack;
namespace fs = std::filesystem;

namespace {
double now() {
  return std::chrono::duration<double>(std::chrono::steady_clock::now().time_since_epoch()).count();
}
double cpu_seconds() {
  rusage u{};
  getrusage(RUSAGE_SELF, &u);
  return u.ru_utime.tv_sec + u.ru_stime.tv_sec + 1e-6 * (u.ru_utime.tv_usec + u.ru_stime.tv_usec);
}
long peak_rss_kib() {
  rusage u{};
  getrusage(RUSAGE_SELF, &u);
  return u.ru_maxrss;
}

// A 12-bit off-axis hologram of smooth phase bumps with a diagonal carrier
// of 0.23 cycles/pixel on each axis (|fc| = 0.325 c/px >= 3 NA/lambda0 =
// 0.307 c/px for the instrument below, Cuche et al. 2000), varying per frame.
void write_stack(const std::string& path, std::size_t n, std::size_t s) {
  io::StackWriter w(path, "/holograms", io::DType::u16, n, s, s);
  Image<std::uint16_t> f(s, s);
  for (std::size_t k = 0; k < n; ++k) {
    std::uint64_t rng = 0x9E3779B97F4A7C15ull * (k + 1);
    const double cx = s * (0.4 + 0.002 * static_cast<double>(k)), cy = s * 0.5;
    for (std::size_t y = 0; y < s; ++y)
      for (std::size_t x = 0; x < s; ++x) {
        const double r2 = (x - cx) * (x - cx) + (y - cy) * (y - cy);
        const double phi = 2.0 * std::exp(-r2 / (2.0 * 60.0 * 60.0));
        const double carrier = 2.0 * M_PI * 0.23 * (static_cast<double>(x) + static_cast<double>(y));
        rng = rng * 6364136223846793005ull + 1442695040888963407ull;
        const double noise = static_cast<double>(rng >> 40) / static_cast<double>(1 << 24) - 0.5;
        const double i = 1800.0 * (1.25 + std::cos(carrier + phi)) / 1.25 + 8.0 * noise;
        f(y, x) = static_cast<std::uint16_t>(std::clamp(std::lround(i), 0L, 4095L));
      }
    w.write<std::uint16_t>(k, f.view());
  }
  w.close();
}

std::string pipeline_text(const std::string& dir) {
  return "[input]\npath = \"" + dir + "/holograms.h5\"\ndataset = \"/holograms\"\n\n"
         "[instrument]\nwavelength = \"632.8 nm\"\npixel_pitch = \"3.45 um\"\nmagnification = 40.0\n"
         "numerical_aperture = 0.75\nmedium_index = 1.33211\n\n"
         "[[stage]]\ntype = \"fringe\"\n[[stage]]\ntype = \"sideband\"\norder = \"+1\"\n"
         "[[stage]]\ntype = \"propagate\"\ndistance = \"-8 um\"\n\n"
         "[output]\npath = \"" + dir + "/bench-out.h5\"\nproducts = [\"field\", \"amplitude\", \"phase\", \"opd\"]\n"
         "previews = \"none\"\n\n[run]\nfft_wisdom = \"" + dir + "/wisdom\"\n";
}
} // namespace

int main(int argc, char** argv) {
  std::size_t frames = 20, size = 2048;
  int threads = 0, repeats = 3;
  std::string dir = (fs::temp_directory_path() / "wavestack-bench").string();
  for (int i = 1; i + 1 < argc; i += 2) {
    std::string a = argv[i];
    if (a == "--frames") frames = std::stoul(argv[i + 1]);
    else if (a == "--size") size = std::stoul(argv[i + 1]);
    else if (a == "--threads") threads = std::stoi(argv[i + 1]);
    else if (a == "--dir") dir = argv[i + 1];
    else if (a == "--repeats") repeats = std::max(1, std::stoi(argv[i + 1]));
    else {
      std::fprintf(stderr, "unknown option %s\n", a.c_str());
      return 2;
    }
  }
  if (threads <= 0) threads = tbb::info::default_concurrency();
  // As the wavestack program does (pipeline/src/main.cpp): frame-sized
  // buffers stay on the heap instead of being mapped afresh every frame.
  mallopt(M_MMAP_THRESHOLD, 512 << 20);
  mallopt(M_TRIM_THRESHOLD, 1024 << 20);
  try {
    fs::create_directories(dir);
    log::set_level(log::Level::warning);
    const std::string input = dir + "/holograms.h5";
    double t = now();
    bool reuse = false;
    if (fs::exists(input)) { // keep an input of the same shape from an earlier run
      try {
        io::FrameSource old = io::FrameSource::open(input, "/holograms");
        reuse = old.count() == frames && old.height() == size && old.width() == size;
      } catch (const Error&) {
      }
    }
    if (!reuse) write_stack(input, frames, size);
    std::printf("input: %zu frames of %zux%zu uint16 %s in %.1f s\n", frames, size, size,
                reuse ? "reused" : "written", now() - t);

    pipeline::Pipeline pl = pipeline::load_pipeline_text(pipeline_text(dir), "bench.toml", dir);
    pipeline::Engine engine(pl);
    t = now();
    const pipeline::PlanSummary& plan = engine.plan(false);
    std::printf("planning (FFTW measure, wisdom %s/wisdom): %.1f s\n", dir.c_str(), now() - t);
    const pipeline::Shape crop = plan.shapes[1];
    pipeline::RunSettings rs;
    rs.threads = threads;
    // The raw FFT executions of the same frames, with the same plans, on the
    // same number of threads, parallel over frames.
    // The same propagator the propagate stage builds (auto method and
    // padding, band of the objective NA/lambda0), hence the same FFT sizes.
    propagate::PropagatorOptions po;
    po.max_frequency = pl.instrument.numerical_aperture / pl.instrument.wavelength;
    auto prop = propagate::make_propagator(crop.height, crop.width, crop.grid, -8e-6, po);
    const std::size_t ph = prop->padded_height(), pw = prop->padded_width();
    auto r2c = fft::plan_r2c(size, size);
    auto crop_inv = fft::plan_c2c(crop.height, crop.width, fft::Direction::backward, true);
    auto pad_fwd = fft::plan_padded_c2c(ph, pw, crop.height, fft::Direction::forward); // the propagator's own
    auto pad_inv = fft::plan_c2c(ph, pw, fft::Direction::backward, true);
    struct Buffers {
      Image<float> holo;
      Image<cfloat> spec, crop, padded, padspec;
    };
    tbb::enumerable_thread_specific<Buffers> bufs([&] {
      Buffers b;
      b.holo.resize(size, size);
      b.holo.fill(1.0f);
      b.spec.resize(size, size / 2 + 1);
      b.crop.resize(crop.height, crop.width);
      b.crop.fill(cfloat(1, 0));
      b.padded.resize(ph, pw);
      b.padded.fill(cfloat(1, 0));
      b.padspec.resize(ph, pw);
      return b;
    });
    // Pipeline and raw FFTs alternate `repeats` times; the best of each is
    // kept (a run that writes hundreds of MB shares the machine with the
    // kernel's write-back: single runs on a 2-core VM moved the ratio
    // between 1.5 and 3).
    pipeline::RunReport rep;
    double cpu_run = 0, fft_s = 1e30;
    std::vector<double> ratios;
    for (int k = 0; k < repeats; ++k) {
      const double cpu0 = cpu_seconds();
      pipeline::RunReport r = engine.run(rs);
      const double cpu = cpu_seconds() - cpu0;
      if (k == 0 || r.seconds < rep.seconds) {
        rep = r;
        cpu_run = cpu;
      }
      tbb::global_control limit(tbb::global_control::max_allowed_parallelism, static_cast<std::size_t>(threads));
      tbb::parallel_for(std::size_t(0), std::size_t(threads), [&](std::size_t) { bufs.local(); }); // warm
      t = now();
      tbb::parallel_for(std::size_t(0), frames, [&](std::size_t) {
        Buffers& b = bufs.local();
        r2c->execute(b.holo.data(), b.spec.data());
        crop_inv->execute(b.crop.data(), b.crop.data());
        pad_fwd->execute(b.padded.data(), b.padspec.data());
        pad_inv->execute(b.padspec.data(), b.padspec.data());
      });
      const double f = now() - t;
      fft_s = std::min(fft_s, f);
      ratios.push_back(r.seconds / f);
    }

    std::printf("hologram %zux%zu -> crop %zux%zu -> padded %zux%zu, %d threads\n", size, size, crop.height,
                crop.width, ph, pw, threads);
    std::printf("pipeline: %zu frames in %.3f s = %.2f frames/s, CPU use %.2f cores\n", rep.frames, rep.seconds,
                rep.frames / rep.seconds, cpu_run / rep.seconds);
    std::printf("raw FFTs of the same frames: %.3f s\n", fft_s);
    std::printf("ratio pipeline / FFT time: %.2f (target <= 2; best of %d runs each; per run:", rep.seconds / fft_s,
                repeats);
    for (const double r : ratios) std::printf(" %.2f", r);
    std::printf(")\n");
    std::printf("peak RSS: %ld KiB (%zu frames)\n", peak_rss_kib(), frames);
    fs::remove(dir + "/bench-out.h5");
  } catch (const std::exception& e) {
    return pipeline::report_error(e);
  }
  return 0;
}
