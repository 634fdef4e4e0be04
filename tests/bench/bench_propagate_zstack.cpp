// Benchmark: a 41-plane z-stack of a 1024×1024 field (PlaneStack: one
// forward FFT, then per plane one transfer-function multiply, one inverse
// FFT and the crop) against 41 bare inverse FFTs of the same padded size,
// measured in the same run, for the padding auto would choose for a typical
// microscope case, for padding none and for padding 2. FFT plans are made
// with fft::Planning::measure first, outside the timing (estimate plans run
// several times slower on some CPUs). One thread for the ratios; then two
// threads, parallel over planes from one shared spectrum, against two
// threads each doing half of the inverse FFTs. Asserts nothing about time.
//
//   bench_propagate_zstack [repeats=5]
//
// Prints per case: padded size, time of the stack, time of 41 inverse FFTs
// (the faster of in-place and out-of-place plans; the stack itself inverts
// out of place), their ratio (target <= 1.3), and the transfer-function
// memory. Other processes on the machine disturb both alike only roughly:
// stack and reference alternate within each repeat and the best is kept.
#include "wavestack/fft/fft.hpp"
#include "wavestack/propagate/method.hpp"
#include "wavestack/propagate/plane_stack.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <complex>
#include <cstdio>
#include <cstdlib>
#include <random>
#include <thread>
#include <vector>

using namespace wavestack;
using namespace wavestack::propagate;

namespace {

using clock_type = std::chrono::steady_clock;

double ms_since(clock_type::time_point t0) {
  return std::chrono::duration<double, std::milli>(clock_type::now() - t0).count();
}

} // namespace

int main(int argc, char** argv) {
  const int repeats = argc > 1 ? std::max(1, std::atoi(argv[1])) : 5;
  fft::set_planning(fft::Planning::measure);

  // Typical microscope case: 3.45 µm camera pixels at 40x (86.25 nm in the
  // object), 632.8 nm in water (n = 1.333), NA 0.75; planes -20..20 µm.
  const std::size_t n = 1024, S = 41;
  Grid g;
  g.dy = g.dx = 3.45e-6 / 40;
  g.wavelength = 632.8e-9;
  g.medium_index = 1.333;
  std::vector<double> z(S);
  for (std::size_t s = 0; s < S; ++s) z[s] = (static_cast<double>(s) - 20.0) * 1e-6;
  const double na = 0.75;

  // A random field (contents do not matter for the timing, but avoid zeros).
  Image<cfloat> u(n, n);
  std::mt19937 rng(1);
  std::normal_distribution<float> gauss(0.f, 1.f);
  for (auto& v : u) v = cfloat(gauss(rng), gauss(rng));

  struct Case {
    const char* name;
    Padding padding;
  };
  const Case cases[] = {{"auto (NA 0.75)", Padding::automatic()}, {"none", Padding::none()}, {"2", Padding::of(2)}};
  std::printf("z-stack of %zu planes (-20..20 um), %zux%zu field, pitch %.2f nm, n = %.3f, NA %.2f; best of %d\n", S,
              n, n, g.dx * 1e9, g.medium_index, na, repeats);
  std::printf("auto_pad_factor at 20 um = %.4f\n", auto_pad_factor(n, n, g, 20e-6, na / g.wavelength));
  for (const Case& c : cases) {
    PropagatorOptions o;
    o.padding = c.padding;
    o.max_frequency = na / g.wavelength;
    auto t_plan = clock_type::now();
    PlaneStack stack(n, n, g, z, o); // measures the FFT plans and builds 41 transfer functions
    const double plan_ms = ms_since(t_plan);
    const std::size_t ph = stack.padded_height(), pw = stack.padded_width();
    // References: bare inverse FFTs of the padded size, in place and out of
    // place (the stack uses the out-of-place plan); the faster one counts.
    auto inv = fft::plan_c2c(ph, pw, fft::Direction::backward, true);
    auto inv_oop = fft::plan_c2c(ph, pw, fft::Direction::backward, false);
    std::size_t tf_bytes = 0;
    for (std::size_t s = 0; s < S; ++s) tf_bytes += stack.transfer_function(s)->bytes();

    auto ws = stack.make_workspace();
    Image<cfloat> spectrum = stack.make_spectrum(), out(n, n);
    stack.forward(u.view(), spectrum, ws);
    Image<cfloat> buf(ph, pw);
    // Warm up both paths once.
    stack.plane(0, spectrum, out.view(), ws);
    std::copy(spectrum.begin(), spectrum.end(), buf.begin());
    inv->execute(buf.data(), buf.data());

    // 41 inverse FFTs on the same kind of data: before each one the buffer
    // is refilled with the spectrum (untimed; it also leaves the buffer as
    // warm in cache as the stack's product buffer is before its FFT), and
    // only the transforms are timed.
    auto ifft_series = [&](Image<cfloat>& b, std::size_t first, std::size_t step) {
      double t = 0;
      for (std::size_t s = first; s < S; s += step) {
        std::copy(spectrum.begin(), spectrum.end(), b.begin());
        const auto t0 = clock_type::now();
        inv->execute(b.data(), b.data());
        t += ms_since(t0);
      }
      return t;
    };
    // Out of place: the spectrum is the (preserved) input, `b` the output.
    auto ifft_series_oop = [&](Image<cfloat>& b, std::size_t first, std::size_t step) {
      double t = 0;
      for (std::size_t s = first; s < S; s += step) {
        const auto t0 = clock_type::now();
        inv_oop->execute(spectrum.data(), b.data());
        t += ms_since(t0);
      }
      return t;
    };
    // Stack and reference alternate within each repeat, so both see the
    // same machine load; the best of each is kept.
    double t_stack = 1e300, t_ip = 1e300, t_oop = 1e300;
    for (int r = 0; r < repeats; ++r) {
      const auto t0 = clock_type::now();
      stack.forward(u.view(), spectrum, ws);
      for (std::size_t s = 0; s < S; ++s) stack.plane(s, spectrum, out.view(), ws);
      t_stack = std::min(t_stack, ms_since(t0));
      t_ip = std::min(t_ip, ifft_series(buf, 0, 1));
      t_oop = std::min(t_oop, ifft_series_oop(buf, 0, 1));
    }
    const double t_fft = std::min(t_ip, t_oop);

    // Two threads: planes split between them, shared spectrum, own workspaces.
    auto ws2 = stack.make_workspace();
    Image<cfloat> out2(n, n), buf2(ph, pw);
    double t_stack2 = 1e300, t_fft2 = 1e300;
    for (int r = 0; r < repeats; ++r) {
      const auto t0 = clock_type::now();
      stack.forward(u.view(), spectrum, ws);
      std::thread other([&] {
        for (std::size_t s = 1; s < S; s += 2) stack.plane(s, spectrum, out2.view(), ws2);
      });
      for (std::size_t s = 0; s < S; s += 2) stack.plane(s, spectrum, out.view(), ws);
      other.join();
      t_stack2 = std::min(t_stack2, ms_since(t0));
      // Reference with two threads: each times its own transforms; the
      // slower thread's total is the wall time.
      for (bool oop : {false, true}) {
        double t_other = 0;
        std::thread other2([&] { t_other = oop ? ifft_series_oop(buf2, 1, 2) : ifft_series(buf2, 1, 2); });
        const double t_me = oop ? ifft_series_oop(buf, 0, 2) : ifft_series(buf, 0, 2);
        other2.join();
        t_fft2 = std::min(t_fft2, std::max(t_me, t_other));
      }
    }

    std::printf("\npadding %-15s padded %zux%zu  (plan + %zu transfer functions: %.0f ms, %.1f MB of tables)\n", c.name,
                ph, pw, S, plan_ms, static_cast<double>(tf_bytes) / 1048576.0);
    std::printf("  1 thread : stack %8.1f ms (%.2f ms/plane), %zu inverse FFTs %8.1f ms (in place %.1f, out of "
                "place %.1f) -> ratio %.3f\n",
                t_stack, t_stack / S, S, t_fft, t_ip, t_oop, t_stack / t_fft);
    std::printf("  2 threads: stack %8.1f ms, %zu inverse FFTs %8.1f ms -> ratio %.3f; stack speed-up 1->2 threads %.2f\n",
                t_stack2, S, t_fft2, t_stack2 / t_fft2, t_stack / t_stack2);
    std::printf("  method: %s\n", stack.choice().reason.c_str());
  }
  return 0;
}
