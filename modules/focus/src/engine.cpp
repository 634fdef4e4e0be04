#include "engine.hpp"

#include "isa.hpp"

#include "wavestack/core/units.hpp"
#include "wavestack/propagate/method.hpp"

#include <algorithm>
#include <cstring>

#if defined(__x86_64__) && defined(__GNUC__)
#include <immintrin.h>
#define WAVESTACK_FOCUS_SIMD 1
#endif

namespace wavestack::focus::detail {

namespace {

bool positive_finite(double v) { return std::isfinite(v) && v > 0.0; }

// Spectrum × transfer function. o[i] = s[i]·(t[i]·k) on interleaved
// (re, im) floats — or t[n-1-i] with `rev`, the mirrored half of a row —
// written out as a·c - b·d, a·d + b·c like propagate's multiply
// (std::complex's operator* follows C99 Annex G and does not vectorise).
// The SIMD versions (AVX-512 or AVX2, chosen at run time; no FMA) round
// exactly like the scalar loop, and do the two spectrum rows ky and ph-ky
// that share a quarter row of the table together, so the table row and its
// shuffles are loaded once.
void mul_scalar(const float* s, float* o, const float* t, std::size_t n, float k, bool rev) {
  for (std::size_t i = 0; i < n; ++i) {
    const std::size_t j = rev ? n - 1 - i : i;
    const float a = s[2 * i], b = s[2 * i + 1], c = t[2 * j] * k, d = t[2 * j + 1] * k;
    o[2 * i] = a * c - b * d;
    o[2 * i + 1] = a * d + b * c;
  }
}

/// Rows one step ahead (the next quarter row and mirrored spectrum row),
/// prefetched while the current ones are multiplied: the tables of a sweep
/// come from memory, not cache, and the mirrored rows walk memory
/// backwards, which the hardware prefetchers do not follow (measured: the
/// multiply of 81 different 512x512 tables took 101 us per plane, 82 us
/// with this, 68 us with one table in cache). The rows qy walk forwards and
/// need no help. Null: nothing to prefetch.
struct Ahead {
  const float *t = nullptr, *s1 = nullptr;
};

#if defined(WAVESTACK_FOCUS_SIMD)
// g++ would contract a·c + u into an FMA where the target has one (C++ is
// compiled with -ffp-contract=fast); keep the scalar loop's roundings. The
// AVX-512 intrinsics' headers trip a false -Wmaybe-uninitialized in g++ 12.
#pragma GCC push_options
#pragma GCC optimize("fp-contract=off")
#pragma GCC diagnostic push
#pragma GCC diagnostic ignored "-Wmaybe-uninitialized"
/// Prefetch the cache line of complex value i of each row ahead.
inline void prefetch(const Ahead& a, std::size_t i) {
  if (a.t) _mm_prefetch(reinterpret_cast<const char*>(a.t + 2 * i), _MM_HINT_T0);
  if (a.s1) _mm_prefetch(reinterpret_cast<const char*>(a.s1 + 2 * i), _MM_HINT_T0);
}

/// Eight complex table values from t (rev: t[m-1..0] reversed, m <= 8),
/// times k, as (c, c) and (d, d) per pair; lanes: the float lanes to load.
__attribute__((target("avx512f"))) inline void table8(const float* t, bool rev, std::size_t m, __mmask16 lanes,
                                                     float k, __m512& c, __m512& d) {
  __m512 q = lanes == 0xFFFF ? _mm512_loadu_ps(t) : _mm512_maskz_loadu_ps(lanes, t);
  if (rev) { // lane j takes value m-1-j
    const __m512i idx = _mm512_and_si512(
        _mm512_sub_epi64(_mm512_set1_epi64(static_cast<long long>(m) - 1), _mm512_set_epi64(7, 6, 5, 4, 3, 2, 1, 0)),
        _mm512_set1_epi64(7));
    q = _mm512_castpd_ps(_mm512_permutexvar_pd(idx, _mm512_castps_pd(q)));
  }
  if (k != 1.0f) q = _mm512_mul_ps(q, _mm512_set1_ps(k));
  c = _mm512_moveldup_ps(q);
  d = _mm512_movehdup_ps(q);
}
/// o = a·(c + i d) for eight complex values a (sw = a with re and im
/// swapped); Masked: only the float lanes in m are written (masked stores
/// are slow on some CPUs: the tail only).
template <bool Masked>
__attribute__((target("avx512f"))) inline void cmul8(__m512 a, __m512 sw, __m512 c, __m512 d, float* o,
                                                    __mmask16 m) {
  const __m512i re_sign = _mm512_set1_epi64(0x80000000LL); // sign bit of each real (even) lane
  const __m512 u = _mm512_castsi512_ps(_mm512_xor_si512(_mm512_castps_si512(_mm512_mul_ps(sw, d)), re_sign));
  const __m512 r = _mm512_add_ps(_mm512_mul_ps(a, c), u); // (a·c - b·d, b·c + a·d)
  if constexpr (Masked)
    _mm512_mask_storeu_ps(o, m, r);
  else
    _mm512_storeu_ps(o, r);
}
/// Eight complex values at offset i of rows s0 → o0 and s1 → o1 (s1 may be
/// null) times the table t (m <= 8 values; masked when Masked).
template <bool Masked>
__attribute__((target("avx512f"))) inline void group8(const float* s0, float* o0, const float* s1, float* o1,
                                                     const float* t, std::size_t n, std::size_t i, std::size_t m,
                                                     float k, bool rev) {
  const __mmask16 lanes = static_cast<__mmask16>((1u << (2 * m)) - 1);
  __m512 c, d;
  table8(t + 2 * (rev ? n - i - m : i), rev, m, lanes, k, c, d);
  const __m512 a0 = Masked ? _mm512_maskz_loadu_ps(lanes, s0 + 2 * i) : _mm512_loadu_ps(s0 + 2 * i);
  cmul8<Masked>(a0, _mm512_permute_ps(a0, _MM_SHUFFLE(2, 3, 0, 1)), c, d, o0 + 2 * i, lanes);
  if (s1) {
    const __m512 a1 = Masked ? _mm512_maskz_loadu_ps(lanes, s1 + 2 * i) : _mm512_loadu_ps(s1 + 2 * i);
    cmul8<Masked>(a1, _mm512_permute_ps(a1, _MM_SHUFFLE(2, 3, 0, 1)), c, d, o1 + 2 * i, lanes);
  }
}
/// All n values (the last group of fewer than 8 masked); returns n.
__attribute__((target("avx512f"))) std::size_t mul_avx512(const float* s0, float* o0, const float* s1, float* o1,
                                                         const float* t, std::size_t n, float k, bool rev,
                                                         const Ahead& ahead) {
  std::size_t i = 0;
  for (; i + 8 <= n; i += 8) {
    prefetch(ahead, i);
    group8<false>(s0, o0, s1, o1, t, n, i, 8, k, rev);
  }
  if (i < n) group8<true>(s0, o0, s1, o1, t, n, i, n - i, k, rev);
  return n;
}

/// The same four complex values at a time; returns the count done.
__attribute__((target("avx2"))) inline __m256 cmul4(__m256 a, __m256 sw, __m256 c, __m256 d) {
  return _mm256_addsub_ps(_mm256_mul_ps(a, c), _mm256_mul_ps(sw, d));
}
__attribute__((target("avx2"))) std::size_t mul_avx2(const float* s0, float* o0, const float* s1, float* o1,
                                                     const float* t, std::size_t n, float k, bool rev,
                                                     const Ahead& ahead) {
  const __m256 kk = _mm256_set1_ps(k);
  std::size_t i = 0;
  for (; i + 4 <= n; i += 4) {
    if (i % 8 == 0) prefetch(ahead, i); // one cache line holds 8 complex values
    __m256 q = rev ? _mm256_castpd_ps(_mm256_permute4x64_pd(_mm256_castps_pd(_mm256_loadu_ps(t + 2 * (n - 4 - i))),
                                                            _MM_SHUFFLE(0, 1, 2, 3)))
                   : _mm256_loadu_ps(t + 2 * i);
    if (k != 1.0f) q = _mm256_mul_ps(q, kk);
    const __m256 c = _mm256_moveldup_ps(q), d = _mm256_movehdup_ps(q);
    const __m256 a0 = _mm256_loadu_ps(s0 + 2 * i);
    _mm256_storeu_ps(o0 + 2 * i, cmul4(a0, _mm256_permute_ps(a0, _MM_SHUFFLE(2, 3, 0, 1)), c, d));
    if (s1) {
      const __m256 a1 = _mm256_loadu_ps(s1 + 2 * i);
      _mm256_storeu_ps(o1 + 2 * i, cmul4(a1, _mm256_permute_ps(a1, _MM_SHUFFLE(2, 3, 0, 1)), c, d));
    }
  }
  return i;
}
#pragma GCC diagnostic pop
#pragma GCC pop_options
#endif

/// Rows s0 → o0 and s1 → o1 (s1 may be null) times n table values.
void mul_rows(const float* s0, float* o0, const float* s1, float* o1, const float* t, std::size_t n, float k,
              bool rev, const Ahead& ahead) {
  std::size_t i = 0;
#if defined(WAVESTACK_FOCUS_SIMD)
  const bool avx512 = isa() == Isa::avx512, avx2 = isa() == Isa::avx2;
  if (avx512)
    i = mul_avx512(s0, o0, s1, o1, t, n, k, rev, ahead);
  else if (avx2)
    i = mul_avx2(s0, o0, s1, o1, t, n, k, rev, ahead);
#else
  (void)ahead;
#endif
  // The rest o[i..n) takes t[i..n), or with rev t[n-1-i..0] = t[0..n-i) reversed.
  const float* tr = rev ? t : t + 2 * i;
  mul_scalar(s0 + 2 * i, o0 + 2 * i, tr, n - i, k, rev);
  if (s1) mul_scalar(s1 + 2 * i, o1 + 2 * i, tr, n - i, k, rev);
}

/// out = in · H · k over a ph×pw array in FFT bin order, H read from the
/// quarter table of `t` (bins 0..ph/2 × 0..pw/2, mirrored: row ky uses
/// quarter row min(ky, ph-ky), column kx quarter column min(kx, pw-kx)).
/// Only t's support is read from `in`; out is zero elsewhere (H = 0 there).
/// in may equal out. Only quarter rows [qa, qb) of 0..ph/2 (the spectrum
/// rows qy and ph-qy of each): disjoint ranges may run on different threads.
void multiply_plane(const propagate::TransferFunction& t, const cfloat* in, cfloat* out, float k,
                    std::size_t qa = 0, std::size_t qb = std::size_t(-1)) {
  const std::size_t ph = t.padded_height(), pw = t.padded_width(), hy = ph / 2;
  const std::size_t n1 = pw / 2 + 1, n2 = pw - n1;
  auto row = [&](const cfloat* base, std::size_t ky) { return reinterpret_cast<const float*>(base + ky * pw); };
  auto paired = [&](std::size_t qy) { return qy != 0 && ph - qy != qy; }; // rows qy and ph-qy both exist
  for (std::size_t qy = qa; qy <= hy && qy < qb; ++qy) {
    const float* q = reinterpret_cast<const float*>(t.quarter().row(qy));
    const bool pair = paired(qy);
    const float* s0 = row(in, qy);
    const float* s1 = pair ? row(in, ph - qy) : nullptr;
    float* o0 = reinterpret_cast<float*>(out + qy * pw);
    float* o1 = pair ? reinterpret_cast<float*>(out + (ph - qy) * pw) : nullptr;
    Ahead ahead;
    if (qy < hy) {
      ahead.t = reinterpret_cast<const float*>(t.quarter().row(qy + 1));
      ahead.s1 = paired(qy + 1) ? row(in, ph - qy - 1) : nullptr;
    }
    // Support e = quarter columns 0..e-1: columns [0, f) forwards and pw-j
    // for j = r..1 backwards; zeros in between.
    const std::size_t e = t.support(qy);
    const std::size_t f = std::min(e, n1), r = e > 1 ? std::min(e - 1, n2) : 0, gap = pw - r - f;
    mul_rows(s0, o0, s1, o1, q, f, k, false, ahead);
    const std::size_t back = 2 * (pw - r);
    ahead.t = nullptr; // the forward pass fetched the whole next quarter row
    if (ahead.s1) ahead.s1 += back;
    mul_rows(s0 + back, o0 + back, pair ? s1 + back : nullptr, pair ? o1 + back : nullptr, q + 2, r, k, true, ahead);
    std::memset(static_cast<void*>(o0 + 2 * f), 0, gap * sizeof(cfloat));
    if (pair) std::memset(static_cast<void*>(o1 + 2 * f), 0, gap * sizeof(cfloat));
  }
}

} // namespace

Engine::Engine(std::size_t h_, std::size_t w_, const Grid& grid_, double from, double to, double step_,
               double pad_factor, bool band_limit, Background background_, int refine_levels)
    : h(h_), w(w_), grid(grid_), step(step_), background(background_), levels(refine_levels) {
  if (h == 0 || w == 0) fail_config("focus search: the field is empty");
  if (!positive_finite(grid.dx) || !positive_finite(grid.dy) || !positive_finite(grid.wavelength) ||
      !positive_finite(grid.medium_index))
    fail_config("focus search: the grid needs a positive pixel pitch, wavelength and medium index");
  if (!std::isfinite(from) || !std::isfinite(to)) fail_config("focus search: from and to must be finite lengths");
  if (!positive_finite(step)) fail_config("focus search: the step must be a positive length");
  if (!(to > from))
    fail_config("focus search: 'to' (" + format_length(to) + ") must be larger than 'from' (" + format_length(from) +
                ")");
  if (refine_levels < 0 || refine_levels > 20) fail_config("focus search: refine_levels must be 0..20");
  const double count = std::floor((to - from) / step + 1e-9) + 1;
  if (count < 3)
    fail_config("focus search: the range " + format_length(from) + " .. " + format_length(to) + " with step " +
                format_length(step) + " has fewer than 3 planes");
  if (count > 100000) fail_config("focus search: more than 100000 planes; use a larger step");
  if (!(std::isfinite(pad_factor) && pad_factor >= 1.0)) fail_config("focus search: pad_factor must be at least 1");
  const std::size_t s = static_cast<std::size_t>(count);
  ph = propagate::padded_length(h, pad_factor);
  pw = propagate::padded_length(w, pad_factor);
  const auto kind = propagate::TransferKind::angular_spectrum;
  distances.reserve(s);
  planes.reserve(s);
  for (std::size_t i = 0; i < s; ++i) {
    distances.push_back(from + static_cast<double>(i) * step);
    planes.push_back(propagate::cached_transfer(kind, ph, pw, grid, distances.back(), band_limit));
  }
  offsets.reserve(2 * static_cast<std::size_t>(levels));
  double hh = step;
  for (int j = 0; j < levels; ++j) {
    hh /= 2;
    offsets.push_back(propagate::cached_transfer(kind, ph, pw, grid, -hh, band_limit));
    offsets.push_back(propagate::cached_transfer(kind, ph, pw, grid, +hh, band_limit));
  }
  fwd = fft::plan_padded_c2c(ph, pw, h, fft::Direction::forward);
  inv = fft::plan_c2c(ph, pw, fft::Direction::backward, true);
}

EngineWorkspace Engine::make_workspace(const MetricEvaluator& ev, bool map, std::size_t threads) const {
  EngineWorkspace ws;
  ws.padded = Image<cfloat>(ph, pw, cfloat(0.0f, 0.0f));
  ws.row_sums.assign(3 * h, 0.0);
  ws.spectrum = Image<cfloat>(ph, pw);
  ws.moved = Image<cfloat>(ph, pw);
  if (threads == 0) threads = static_cast<std::size_t>(std::max(1, tbb::this_task_arena::max_concurrency()));
  ws.slots.resize(threads);
  for (Slot& s : ws.slots) {
    s.buf = Image<cfloat>(ph, pw);
    s.out = s.buf.view().sub(0, 0, h, w);
    s.scratch = ev.make_scratch();
    if (map) s.map = Image<float>(h, w, 0.0f);
  }
  return ws;
}

void Engine::prepare(ImageView<const cfloat> field, EngineWorkspace& ws) const {
  if (field.height() != h || field.width() != w)
    fail_internal("focus search: the field is " + std::to_string(field.height()) + "x" +
                  std::to_string(field.width()) + ", the search was planned for " + std::to_string(h) + "x" +
                  std::to_string(w));
  // Per-row sums on all threads, added up in row order afterwards: the
  // same value for any thread count.
  std::vector<double>& rs = ws.row_sums;
  rs.resize(3 * h); // allocated by make_workspace; no-op here
  on_rows(h, [&](std::size_t y) {
    const cfloat* r = field.row(y);
    double sr = 0, si = 0, sp = 0;
    for (std::size_t x = 0; x < w; ++x) {
      sr += r[x].real();
      si += r[x].imag();
      sp += static_cast<double>(r[x].real()) * r[x].real() + static_cast<double>(r[x].imag()) * r[x].imag();
    }
    rs[3 * y] = sr;
    rs[3 * y + 1] = si;
    rs[3 * y + 2] = sp;
  });
  std::complex<double> sum(0, 0);
  double power = 0;
  for (std::size_t y = 0; y < h; ++y) {
    sum += std::complex<double>(rs[3 * y], rs[3 * y + 1]);
    power += rs[3 * y + 2];
  }
  ws.rms = std::sqrt(power / static_cast<double>(h * w));
  sum = background == Background::mean ? sum / static_cast<double>(h * w) : std::complex<double>(0, 0);
  ws.background = cfloat(static_cast<float>(sum.real()), static_cast<float>(sum.imag()));
  // Only the corner is written, and the forward plan preserves its input,
  // so the zero padding written by make_workspace stays.
  on_rows(h, [&](std::size_t y) {
    const cfloat* r = field.row(y);
    cfloat* o = ws.padded.row(y);
    for (std::size_t x = 0; x < w; ++x) o[x] = r[x] - ws.background;
  });
  fwd->execute(ws.padded.data(), ws.spectrum.data());
}

void Engine::propagate(const propagate::TransferFunction& t, const Image<cfloat>& spectrum, Slot& s) const {
  multiply_plane(t, spectrum.data(), s.buf.data(), 1.0f);
  inv->execute(s.buf.data(), s.buf.data());
}

void Engine::move_spectrum(EngineWorkspace& ws, const propagate::TransferFunction& t, bool from_spectrum) const {
  const float n = static_cast<float>(static_cast<double>(ph) * static_cast<double>(pw));
  const cfloat* in = from_spectrum ? ws.spectrum.data() : ws.moved.data();
  // Between the refinement's parallel pairs nothing else runs: all threads
  // share the pass (each quarter row pair is independent, so the values do
  // not depend on the split).
  on_ranges(0, ph / 2 + 1, 16, [&](std::size_t a, std::size_t b) { multiply_plane(t, in, ws.moved.data(), n, a, b); });
}

} // namespace wavestack::focus::detail
