#include "wavestack/focus/metric.hpp"

#include "wavestack/core/error.hpp"

#include "isa.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <limits>
#include <string>

#if defined(__SSE2__)
#include <emmintrin.h>
#endif
#if defined(__x86_64__) && defined(__GNUC__)
#include <immintrin.h>
#endif

namespace wavestack::focus {

namespace {

constexpr std::array<MetricInfo, 8> infos = {{
    {Metric::auto_select, "auto", Sense::maximum, "resolves to tamura-gradient"},
    {Metric::integrated_amplitude, "integrated-amplitude", Sense::depends,
     "Dubois et al., Opt. Express 14(13), 5895 (2006) [confirmed]"},
    {Metric::amplitude_variance, "amplitude-variance", Sense::depends,
     "Dubois et al., Opt. Express 14(13), 5895 (2006) [from memory]"},
    {Metric::tamura_amplitude, "tamura-amplitude", Sense::depends,
     "Memmolo et al., Opt. Lett. 36(10), 1945 (2011) [from memory]"},
    {Metric::tamura_gradient, "tamura-gradient", Sense::maximum, "Tamamitsu et al., arXiv (2017) [confirmed]"},
    {Metric::gradient_energy, "gradient-energy", Sense::depends,
     "[common practice]; Langehanenberg et al., Appl. Opt. 47(19), D176 (2008) [from memory]"},
    {Metric::laplacian_variance, "laplacian-variance", Sense::depends,
     "[common practice]; Langehanenberg et al., Appl. Opt. 47(19), D176 (2008) [from memory]"},
    {Metric::spectral_energy, "spectral-energy", Sense::depends,
     "[common practice]; after Langehanenberg et al., Appl. Opt. 47(19), D176 (2008) [from memory]"},
}};

constexpr std::array<Metric, 7> concrete = {Metric::integrated_amplitude, Metric::amplitude_variance,
                                            Metric::tamura_amplitude,     Metric::tamura_gradient,
                                            Metric::gradient_energy,      Metric::laplacian_variance,
                                            Metric::spectral_energy};

// The pixel kernels below run once per pixel per plane, the hot loop of a
// focus sweep after the FFT. std::sqrt sets errno and is not vectorised
// without -fno-math-errno, so the amplitude and gradient-modulus rows, the
// map and the double sums use SSE2 (part of every x86-64) four pixels at a
// time, with the scalar loop for the rest of a row and other targets.

inline float amp(float re, float im) { return std::sqrt(re * re + im * im); }

#if defined(__SSE2__)
/// |p + b| of four interleaved complex values p[0..8).
inline __m128 amp4(const float* p, __m128 b) {
  const __m128 a = _mm_add_ps(_mm_loadu_ps(p), b), c = _mm_add_ps(_mm_loadu_ps(p + 4), b);
  const __m128 a2 = _mm_mul_ps(a, a), c2 = _mm_mul_ps(c, c);
  return _mm_sqrt_ps(
      _mm_add_ps(_mm_shuffle_ps(a2, c2, _MM_SHUFFLE(2, 0, 2, 0)), _mm_shuffle_ps(a2, c2, _MM_SHUFFLE(3, 1, 3, 1))));
}
/// |∇v|² of four pixels: |p[x+1] - p[x]|² + |q[x] - p[x]|² (q: next row).
inline __m128 grad2_4(const float* p, const float* q) {
  const __m128 p0 = _mm_loadu_ps(p), p1 = _mm_loadu_ps(p + 4);
  const __m128 dx0 = _mm_sub_ps(_mm_loadu_ps(p + 2), p0), dx1 = _mm_sub_ps(_mm_loadu_ps(p + 6), p1);
  const __m128 dy0 = _mm_sub_ps(_mm_loadu_ps(q), p0), dy1 = _mm_sub_ps(_mm_loadu_ps(q + 4), p1);
  const __m128 s0 = _mm_add_ps(_mm_mul_ps(dx0, dx0), _mm_mul_ps(dy0, dy0));
  const __m128 s1 = _mm_add_ps(_mm_mul_ps(dx1, dx1), _mm_mul_ps(dy1, dy1));
  return _mm_add_ps(_mm_shuffle_ps(s0, s1, _MM_SHUFFLE(2, 0, 2, 0)), _mm_shuffle_ps(s0, s1, _MM_SHUFFLE(3, 1, 3, 1)));
}
#endif

#if defined(__x86_64__) && defined(__GNUC__)
#define WAVESTACK_FOCUS_AVX2 1
// AVX2 versions of the hottest kernels (tamura-gradient, the amplitude
// metrics, the object map and the sums), compiled for AVX2 with a target
// attribute and chosen at run time when the CPU has it; same arithmetic in
// the same precision as the SSE2/scalar paths (results may differ in the
// last bit of a sum's round-off, not in the metric's meaning).
namespace avx2 {

__attribute__((target("avx2"))) inline __m256 reorder(__m256 v) {
  // _mm256_shuffle_ps works per 128-bit half: restore pixel order 0..7.
  return _mm256_castpd_ps(_mm256_permute4x64_pd(_mm256_castps_pd(v), _MM_SHUFFLE(3, 1, 2, 0)));
}
__attribute__((target("avx2"))) inline __m256 pair_sum(__m256 a2, __m256 c2) {
  return reorder(_mm256_add_ps(_mm256_shuffle_ps(a2, c2, _MM_SHUFFLE(2, 0, 2, 0)),
                               _mm256_shuffle_ps(a2, c2, _MM_SHUFFLE(3, 1, 3, 1))));
}
/// |p + b| of eight interleaved complex values p[0..16).
__attribute__((target("avx2"))) inline __m256 amp8(const float* p, __m256 b) {
  const __m256 a = _mm256_add_ps(_mm256_loadu_ps(p), b), c = _mm256_add_ps(_mm256_loadu_ps(p + 8), b);
  return _mm256_sqrt_ps(pair_sum(_mm256_mul_ps(a, a), _mm256_mul_ps(c, c)));
}
/// |∇v|² of eight pixels.
__attribute__((target("avx2"))) inline __m256 grad2_8(const float* p, const float* q) {
  const __m256 p0 = _mm256_loadu_ps(p), p1 = _mm256_loadu_ps(p + 8);
  const __m256 dx0 = _mm256_sub_ps(_mm256_loadu_ps(p + 2), p0), dx1 = _mm256_sub_ps(_mm256_loadu_ps(p + 10), p1);
  const __m256 dy0 = _mm256_sub_ps(_mm256_loadu_ps(q), p0), dy1 = _mm256_sub_ps(_mm256_loadu_ps(q + 8), p1);
  return pair_sum(_mm256_add_ps(_mm256_mul_ps(dx0, dx0), _mm256_mul_ps(dy0, dy0)),
                  _mm256_add_ps(_mm256_mul_ps(dx1, dx1), _mm256_mul_ps(dy1, dy1)));
}
/// Rows of amplitude (grad = false) or gradient modulus; returns pixels done.
__attribute__((target("avx2"))) std::size_t row(bool grad, const float* r0, const float* r1, float br, float bi,
                                                std::size_t n, float* q) {
  std::size_t i = 0;
  if (grad) {
    for (; i + 8 <= n; i += 8) _mm256_storeu_ps(q + i, _mm256_sqrt_ps(grad2_8(r0 + 2 * i, r1 + 2 * i)));
  } else {
    const __m256 b8 = _mm256_setr_ps(br, bi, br, bi, br, bi, br, bi);
    for (; i + 8 <= n; i += 8) _mm256_storeu_ps(q + i, amp8(r0 + 2 * i, b8));
  }
  return i;
}
__attribute__((target("avx2"))) std::size_t map(const float* r0, const float* r1, std::size_t n, float* m) {
  std::size_t i = 0;
  for (; i + 8 <= n; i += 8)
    _mm256_storeu_ps(m + i, _mm256_max_ps(_mm256_loadu_ps(m + i), grad2_8(r0 + 2 * i, r1 + 2 * i)));
  return i;
}
__attribute__((target("avx2"))) std::size_t sums(const float* q, std::size_t n, double& s1, double& s2) {
  std::size_t i = 0;
  __m256d a0 = _mm256_setzero_pd(), a1 = _mm256_setzero_pd(), b0 = _mm256_setzero_pd(), b1 = _mm256_setzero_pd();
  for (; i + 8 <= n; i += 8) {
    const __m256 v = _mm256_loadu_ps(q + i);
    const __m256d lo = _mm256_cvtps_pd(_mm256_castps256_ps128(v)), hi = _mm256_cvtps_pd(_mm256_extractf128_ps(v, 1));
    a0 = _mm256_add_pd(a0, lo);
    a1 = _mm256_add_pd(a1, hi);
    b0 = _mm256_add_pd(b0, _mm256_mul_pd(lo, lo));
    b1 = _mm256_add_pd(b1, _mm256_mul_pd(hi, hi));
  }
  double ta[4], tb[4];
  _mm256_storeu_pd(ta, _mm256_add_pd(a0, a1));
  _mm256_storeu_pd(tb, _mm256_add_pd(b0, b1));
  s1 += (ta[0] + ta[1]) + (ta[2] + ta[3]);
  s2 += (tb[0] + tb[1]) + (tb[2] + tb[3]);
  return i;
}

/// Σq, Σq², Σmq, Σmq² over n values; returns the count done (multiple of 8).
__attribute__((target("avx2"))) std::size_t masked_sums(const float* q, const float* m, std::size_t n, double* out) {
  std::size_t i = 0;
  __m256d s1 = _mm256_setzero_pd(), s2 = _mm256_setzero_pd(), t1 = _mm256_setzero_pd(), t2 = _mm256_setzero_pd();
  for (; i + 8 <= n; i += 8) {
    const __m256 v = _mm256_loadu_ps(q + i), mv = _mm256_mul_ps(v, _mm256_loadu_ps(m + i));
    const __m256d lo = _mm256_cvtps_pd(_mm256_castps256_ps128(v)), hi = _mm256_cvtps_pd(_mm256_extractf128_ps(v, 1));
    const __m256d mlo = _mm256_cvtps_pd(_mm256_castps256_ps128(mv)),
                  mhi = _mm256_cvtps_pd(_mm256_extractf128_ps(mv, 1));
    s1 = _mm256_add_pd(s1, _mm256_add_pd(lo, hi));
    s2 = _mm256_add_pd(s2, _mm256_add_pd(_mm256_mul_pd(lo, lo), _mm256_mul_pd(hi, hi)));
    t1 = _mm256_add_pd(t1, _mm256_add_pd(mlo, mhi));
    t2 = _mm256_add_pd(t2, _mm256_add_pd(_mm256_mul_pd(mlo, lo), _mm256_mul_pd(mhi, hi)));
  }
  double a[4];
  _mm256_storeu_pd(a, s1);
  out[0] += (a[0] + a[1]) + (a[2] + a[3]);
  _mm256_storeu_pd(a, s2);
  out[1] += (a[0] + a[1]) + (a[2] + a[3]);
  _mm256_storeu_pd(a, t1);
  out[2] += (a[0] + a[1]) + (a[2] + a[3]);
  _mm256_storeu_pd(a, t2);
  out[3] += (a[0] + a[1]) + (a[2] + a[3]);
  return i;
}

/// accumulate_split's row sums {Σq, Σq², Σ_even q, Σ_even q²} when the
/// blocks are 8 pixels from pixel 0 (of every 16 pixels, 8 even then 8
/// odd), with the pixel quantity (gradient modulus or amplitude) kept in
/// registers; returns the count done (a multiple of 16).
std::size_t aligned_split_sums(bool grad, const float* r0, const float* r1, float br, float bi, std::size_t n,
                               double* out);

bool available() { return detail::isa() >= detail::Isa::avx2; }

__attribute__((target("avx2"))) inline double total4(__m256d v) {
  double a[4];
  _mm256_storeu_pd(a, v);
  return (a[0] + a[1]) + (a[2] + a[3]);
}

__attribute__((target("avx2"))) std::size_t aligned_split_sums(bool grad, const float* r0, const float* r1, float br,
                                                               float bi, std::size_t n, double* out) {
  const __m256 b8 = _mm256_setr_ps(br, bi, br, bi, br, bi, br, bi);
  __m256d e1 = _mm256_setzero_pd(), e2 = e1, o1 = e1, o2 = e1; // even and odd blocks
  std::size_t i = 0;
  for (; i + 16 <= n; i += 16)
    for (std::size_t h = 0; h < 16; h += 8) {
      const std::size_t j = 2 * (i + h);
      const __m256 v = grad ? _mm256_sqrt_ps(grad2_8(r0 + j, r1 + j)) : amp8(r0 + j, b8);
      const __m256d lo = _mm256_cvtps_pd(_mm256_castps256_ps128(v)), hi = _mm256_cvtps_pd(_mm256_extractf128_ps(v, 1));
      __m256d& a1 = h == 0 ? e1 : o1;
      __m256d& a2 = h == 0 ? e2 : o2;
      a1 = _mm256_add_pd(a1, _mm256_add_pd(lo, hi));
      a2 = _mm256_add_pd(a2, _mm256_add_pd(_mm256_mul_pd(lo, lo), _mm256_mul_pd(hi, hi)));
    }
  const double se1 = total4(e1), se2 = total4(e2);
  out[0] += se1 + total4(o1);
  out[1] += se2 + total4(o2);
  out[2] += se1;
  out[3] += se2;
  return i;
}

} // namespace avx2

// AVX-512 version of the checkerboard sums (accumulate_split) for the
// tamura-gradient and amplitude metrics: the pixel quantity of 16 pixels is
// computed with the same arithmetic as the AVX2/SSE2 kernels above and
// summed at once, without a row buffer; the even-block sums use masked adds
// (Σ m·q with m = 0/1 is Σ q over the set bits). The double sums differ
// from the AVX2 path in their order and in the squares, accumulated with
// one FMA (last-bit round-off). g++ would contract the pixel quantity's
// a·a + b·b too (C++ builds use -ffp-contract=fast): fp-contract is off
// here so it keeps the other paths' roundings. The AVX-512 headers trip a
// false -Wmaybe-uninitialized in g++ 12.
#pragma GCC push_options
#pragma GCC optimize("fp-contract=off")
#pragma GCC diagnostic push
#pragma GCC diagnostic ignored "-Wmaybe-uninitialized"
#pragma GCC diagnostic ignored "-Wuninitialized"
namespace avx512 {

/// Pixel quantity of 16 pixels from the interleaved values p[0..32) of the
/// row (grad: with the next pixel p[2..34) and the next row q[0..32)).
/// Masked: only the float lanes in m0 (pixels 0..7) and m1 (8..15) are
/// read (masked loads are slower: the tail only).
template <bool Masked> __attribute__((target("avx512f"))) inline __m512 load16(__mmask16 m, const float* x) {
  return Masked ? _mm512_maskz_loadu_ps(m, x) : _mm512_loadu_ps(x);
}
/// Lane j of the result is pixel j, or with other `even`/`odd` tables the
/// pixel whose real and imaginary parts they pick (a free reordering).
template <bool Grad, bool Masked>
__attribute__((target("avx512f"))) inline __m512 quantity16(const float* p, const float* q, __m512 b, __mmask16 m0,
                                                           __mmask16 m1, __m512i even, __m512i odd) {
  __m512 s0, s1; // per-component squares of 8 + 8 pixels
  const __m512 p0 = load16<Masked>(m0, p), p1 = load16<Masked>(m1, p + 16);
  if constexpr (Grad) {
    const __m512 dx0 = _mm512_sub_ps(load16<Masked>(m0, p + 2), p0);
    const __m512 dx1 = _mm512_sub_ps(load16<Masked>(m1, p + 18), p1);
    const __m512 dy0 = _mm512_sub_ps(load16<Masked>(m0, q), p0);
    const __m512 dy1 = _mm512_sub_ps(load16<Masked>(m1, q + 16), p1);
    s0 = _mm512_add_ps(_mm512_mul_ps(dx0, dx0), _mm512_mul_ps(dy0, dy0));
    s1 = _mm512_add_ps(_mm512_mul_ps(dx1, dx1), _mm512_mul_ps(dy1, dy1));
  } else {
    const __m512 a0 = _mm512_add_ps(p0, b), a1 = _mm512_add_ps(p1, b);
    s0 = _mm512_mul_ps(a0, a0);
    s1 = _mm512_mul_ps(a1, a1);
  }
  return _mm512_sqrt_ps(
      _mm512_add_ps(_mm512_permutex2var_ps(s0, even, s1), _mm512_permutex2var_ps(s0, odd, s1)));
}

/// The pixels among `valid` where the 0/1 mask m[0..16) is set.
__attribute__((target("avx512f"))) inline __mmask16 set_pixels(const float* m, __mmask16 valid) {
  return _mm512_cmp_ps_mask(_mm512_maskz_loadu_ps(valid, m), _mm512_setzero_ps(), _CMP_NEQ_OQ);
}

/// Running sums of split_sums: s over all pixels (Aligned: the odd half
/// only), t over the masked ones; a/b: pixels 0..7 / 8..15 of each group.
struct SplitAcc {
  __m512d s1a, s1b, s2a, s2b, t1a, t1b, t2a, t2b;
};
/// Adds one group of 16 pixel values v; vlo, vhi: the valid pixels of each
/// half; k: the mask's set pixels (not Aligned).
template <bool Aligned>
__attribute__((target("avx512f"))) inline void add16(SplitAcc& r, __m512 v, __mmask8 vlo, __mmask8 vhi,
                                                    __mmask16 k) {
  const __m512d lo = _mm512_cvtps_pd(_mm512_castps512_ps256(v));
  const __m512d hi = _mm512_cvtps_pd(_mm256_castpd_ps(_mm512_extractf64x4_pd(_mm512_castps_pd(v), 1)));
  if constexpr (Aligned) {
    r.t1a = _mm512_mask_add_pd(r.t1a, vlo, r.t1a, lo);
    r.t2a = _mm512_mask3_fmadd_pd(lo, lo, r.t2a, vlo);
    r.s1b = _mm512_mask_add_pd(r.s1b, vhi, r.s1b, hi);
    r.s2b = _mm512_mask3_fmadd_pd(hi, hi, r.s2b, vhi);
  } else {
    const __mmask8 klo = static_cast<__mmask8>(k & vlo), khi = static_cast<__mmask8>((k >> 8) & vhi);
    r.s1a = _mm512_mask_add_pd(r.s1a, vlo, r.s1a, lo);
    r.s1b = _mm512_mask_add_pd(r.s1b, vhi, r.s1b, hi);
    r.s2a = _mm512_mask3_fmadd_pd(lo, lo, r.s2a, vlo);
    r.s2b = _mm512_mask3_fmadd_pd(hi, hi, r.s2b, vhi);
    r.t1a = _mm512_mask_add_pd(r.t1a, klo, r.t1a, lo);
    r.t1b = _mm512_mask_add_pd(r.t1b, khi, r.t1b, hi);
    r.t2a = _mm512_mask3_fmadd_pd(lo, lo, r.t2a, klo);
    r.t2b = _mm512_mask3_fmadd_pd(hi, hi, r.t2b, khi);
  }
}

/// Lane order that puts the even-block pixels of every group of 16 first:
/// for blocks of 1, 2, 4 or 8 pixels (the pattern repeats every 16 pixels,
/// and each group has 8 pixels of either kind). lane[j] = source lane.
struct LaneOrder {
  int lane[16];
};

/// out[k] = {Σq, Σq², Σmq, Σmq²} over pixels [xa, xa+n) of the rows y in
/// [ya, yb) with block-row parity ((y - y_origin)/tile) % 2 == k (rows[k]
/// of them; the next row too for Grad), m the 0/1 mask of the columns (the
/// last group of fewer than 16 pixels is masked). The sums stay in vector
/// registers over all rows: a per-row reduction cost as much as 90 pixels
/// of a 512-pixel row (measured). Mode masked: m is read. Mode aligned: the mask is known to
/// be 1 on pixels 0..7 and 0 on 8..15 of every 16 (tile 8 from pixel 0), so
/// the two halves go to their own sums and m is not read. Mode permuted:
/// the same with each group's pixels taken in the order `order` (blocks of
/// 1, 2, 4 or 8 at any phase), at no cost: the order is folded into the
/// shuffle that separates real and imaginary parts. Squares are
/// accumulated with FMA.
enum class SplitMode { masked, aligned, permuted };
template <bool Grad, SplitMode Mode>
__attribute__((target("avx512f"))) void split_sums(ImageView<const cfloat> u, std::size_t ya, std::size_t yb,
                                                  std::size_t xa, std::size_t n, std::size_t y_origin,
                                                  std::size_t tile, float br, float bi, const float* m,
                                                  const LaneOrder* order, double (&out)[2][4],
                                                  std::size_t (&rows)[2]) {
  constexpr bool halves = Mode != SplitMode::masked;
  const __m512 b = _mm512_set_ps(bi, br, bi, br, bi, br, bi, br, bi, br, bi, br, bi, br, bi, br);
  const __m512d z = _mm512_setzero_pd();
  // Real and imaginary parts of pixel j in lanes 2j and 2j+1 of a group;
  // permuted: of pixel order->lane[j], so the even-block pixels come first.
  __m512i even = _mm512_set_epi32(30, 28, 26, 24, 22, 20, 18, 16, 14, 12, 10, 8, 6, 4, 2, 0);
  if constexpr (Mode == SplitMode::permuted) even = _mm512_slli_epi32(_mm512_loadu_si512(order->lane), 1);
  const __m512i odd = _mm512_add_epi32(even, _mm512_set1_epi32(1));
  // The last group of fewer than 16 pixels (the same in every row).
  const std::size_t full = n / 16 * 16, c = n - full, c0 = std::min<std::size_t>(c, 8), c1 = c - c0;
  const __mmask16 m0 = static_cast<__mmask16>((1u << (2 * c0)) - 1);
  const __mmask16 m1 = static_cast<__mmask16>((1u << (2 * c1)) - 1);
  const __mmask16 valid = static_cast<__mmask16>((1u << c) - 1);
  __mmask16 lanes = valid; // the valid lanes after the reordering
  if constexpr (Mode == SplitMode::permuted) {
    lanes = 0;
    for (int j = 0; j < 16; ++j)
      if (valid >> order->lane[j] & 1u) lanes = static_cast<__mmask16>(lanes | (1u << j));
  }
  const __mmask16 tail_set = halves || c == 0 ? 0 : set_pixels(m + full, valid);
  // Sums over all rows of each block-row parity, reduced once at the end.
  SplitAcc r[2] = {{z, z, z, z, z, z, z, z}, {z, z, z, z, z, z, z, z}};
  rows[0] = rows[1] = 0;
  for (std::size_t y = ya; y < yb; ++y) {
    const std::size_t par = ((y - y_origin) / tile) % 2;
    ++rows[par];
    SplitAcc& acc = r[par];
    const float* r0 = reinterpret_cast<const float*>(u.row(y) + xa);
    const float* r1 = Grad ? reinterpret_cast<const float*>(u.row(y + 1) + xa) : nullptr;
    for (std::size_t i = 0; i < full; i += 16)
      add16<halves>(acc, quantity16<Grad, false>(r0 + 2 * i, Grad ? r1 + 2 * i : nullptr, b, 0, 0, even, odd), 0xFF,
                    0xFF, halves ? 0 : set_pixels(m + i, 0xFFFF));
    if (c > 0)
      add16<halves>(acc, quantity16<Grad, true>(r0 + 2 * full, Grad ? r1 + 2 * full : nullptr, b, m0, m1, even, odd),
                    static_cast<__mmask8>(lanes), static_cast<__mmask8>(lanes >> 8), tail_set);
  }
  for (int k = 0; k < 2; ++k) {
    SplitAcc& acc = r[k];
    if constexpr (halves) { // all = even half + odd half
      acc.s1a = acc.t1a;
      acc.s2a = acc.t2a;
    }
    out[k][0] = _mm512_reduce_add_pd(_mm512_add_pd(acc.s1a, acc.s1b));
    out[k][1] = _mm512_reduce_add_pd(_mm512_add_pd(acc.s2a, acc.s2b));
    out[k][2] = _mm512_reduce_add_pd(_mm512_add_pd(acc.t1a, acc.t1b));
    out[k][3] = _mm512_reduce_add_pd(_mm512_add_pd(acc.t2a, acc.t2b));
  }
}

bool available() { return detail::isa() == detail::Isa::avx512; }

} // namespace avx512
#pragma GCC diagnostic pop
#pragma GCC pop_options
#endif

/// Metrics with a fused AVX-512 kernel (avx512::split_sums).
bool fused_metric(Metric m) {
  return m == Metric::tamura_gradient || m == Metric::integrated_amplitude || m == Metric::amplitude_variance ||
         m == Metric::tamura_amplitude;
}

/// out += {Σq, Σq², Σmq, Σmq²} for a 0/1 mask m (m·q² = (m·q)·q).
void masked_sums(const float* q, const float* m, std::size_t n, double* out) {
  std::size_t i = 0;
#if defined(WAVESTACK_FOCUS_AVX2)
  if (avx2::available()) i = avx2::masked_sums(q, m, n, out);
#endif
  double a = 0, b = 0, c = 0, d = 0;
  for (; i < n; ++i) {
    const double v = q[i], mv = m[i] * v;
    a += v;
    b += v * v;
    c += mv;
    d += mv * v;
  }
  out[0] += a;
  out[1] += b;
  out[2] += c;
  out[3] += d;
}

/// Domain of the pixel quantity: the rows/columns where it is defined.
struct Domain {
  std::size_t y0, x0, y1, x1;
};

Domain domain(Metric m, std::size_t h, std::size_t w) {
  switch (m) {
  case Metric::tamura_gradient:
  case Metric::gradient_energy: return {0, 0, h > 0 ? h - 1 : 0, w > 0 ? w - 1 : 0};
  case Metric::laplacian_variance: return {1, 1, h > 1 ? h - 1 : 1, w > 1 ? w - 1 : 1};
  default: return {0, 0, h, w};
  }
}

/// q[i] for pixels (y, x0+i), i < n, of metric m on v = u + b. `y` and the
/// columns are inside the metric's domain, so every neighbour read exists.
void row_quantity(Metric m, ImageView<const cfloat> u, cfloat b, std::size_t y, std::size_t x0, std::size_t n,
                  float* __restrict q) {
  const float br = b.real(), bi = b.imag();
  const float* r0 = reinterpret_cast<const float*>(u.row(y) + x0);
  std::size_t i = 0;
  switch (m) {
  case Metric::integrated_amplitude:
  case Metric::amplitude_variance:
  case Metric::tamura_amplitude:
  case Metric::spectral_energy: {
#if defined(WAVESTACK_FOCUS_AVX2)
    if (avx2::available()) i = avx2::row(false, r0, nullptr, br, bi, n, q);
#endif
#if defined(__SSE2__)
    const __m128 b4 = _mm_setr_ps(br, bi, br, bi);
    for (; i + 4 <= n; i += 4) _mm_storeu_ps(q + i, amp4(r0 + 2 * i, b4));
#endif
    for (; i < n; ++i) q[i] = amp(r0[2 * i] + br, r0[2 * i + 1] + bi);
    break;
  }
  case Metric::tamura_gradient: {
    const float* r1 = reinterpret_cast<const float*>(u.row(y + 1) + x0);
#if defined(WAVESTACK_FOCUS_AVX2)
    if (avx2::available()) i = avx2::row(true, r0, r1, br, bi, n, q);
#endif
#if defined(__SSE2__)
    for (; i + 4 <= n; i += 4) _mm_storeu_ps(q + i, _mm_sqrt_ps(grad2_4(r0 + 2 * i, r1 + 2 * i)));
#endif
    for (; i < n; ++i) {
      const float ar = r0[2 * i + 2] - r0[2 * i], ai = r0[2 * i + 3] - r0[2 * i + 1];
      const float cr = r1[2 * i] - r0[2 * i], ci = r1[2 * i + 1] - r0[2 * i + 1];
      q[i] = std::sqrt(ar * ar + ai * ai + cr * cr + ci * ci);
    }
    break;
  }
  case Metric::gradient_energy: {
    const float* r1 = reinterpret_cast<const float*>(u.row(y + 1) + x0);
    for (; i < n; ++i) {
      const float a = amp(r0[2 * i] + br, r0[2 * i + 1] + bi);
      const float ax = amp(r0[2 * i + 2] + br, r0[2 * i + 3] + bi) - a;
      const float ay = amp(r1[2 * i] + br, r1[2 * i + 1] + bi) - a;
      q[i] = ax * ax + ay * ay;
    }
    break;
  }
  case Metric::laplacian_variance: {
    const float* rm = reinterpret_cast<const float*>(u.row(y - 1) + x0);
    const float* rp = reinterpret_cast<const float*>(u.row(y + 1) + x0);
    for (; i < n; ++i) {
      const float a = amp(r0[2 * i] + br, r0[2 * i + 1] + bi);
      const float l = amp(r0[2 * i - 2] + br, r0[2 * i - 1] + bi) + amp(r0[2 * i + 2] + br, r0[2 * i + 3] + bi) +
                      amp(rm[2 * i] + br, rm[2 * i + 1] + bi) + amp(rp[2 * i] + br, rp[2 * i + 1] + bi) - 4.0f * a;
      q[i] = l;
    }
    break;
  }
  case Metric::auto_select: break; // resolved before
  }
}

/// map[i] = max(map[i], |∇v|²) for pixels (y, x0+i) with forward differences.
void row_map(ImageView<const cfloat> u, std::size_t y, std::size_t x0, std::size_t n, float* __restrict map) {
  const float* r0 = reinterpret_cast<const float*>(u.row(y) + x0);
  const float* r1 = reinterpret_cast<const float*>(u.row(y + 1) + x0);
  std::size_t i = 0;
#if defined(WAVESTACK_FOCUS_AVX2)
  if (avx2::available()) i = avx2::map(r0, r1, n, map);
#endif
#if defined(__SSE2__)
  for (; i + 4 <= n; i += 4) _mm_storeu_ps(map + i, _mm_max_ps(_mm_loadu_ps(map + i), grad2_4(r0 + 2 * i, r1 + 2 * i)));
#endif
  for (; i < n; ++i) {
    const float ar = r0[2 * i + 2] - r0[2 * i], ai = r0[2 * i + 3] - r0[2 * i + 1];
    const float cr = r1[2 * i] - r0[2 * i], ci = r1[2 * i + 1] - r0[2 * i + 1];
    map[i] = std::max(map[i], ar * ar + ai * ai + cr * cr + ci * ci);
  }
}

/// Σq and Σq² of q[0..n) in double (float values converted exactly).
void sums(const float* q, std::size_t n, double& s1, double& s2) {
  std::size_t i = 0;
  double a = 0, b = 0;
#if defined(WAVESTACK_FOCUS_AVX2)
  if (avx2::available()) {
    i = avx2::sums(q, n, s1, s2);
    q += i;
    n -= i;
    i = 0;
  }
#endif
#if defined(__SSE2__)
  __m128d a0 = _mm_setzero_pd(), a1 = _mm_setzero_pd(), b0 = _mm_setzero_pd(), b1 = _mm_setzero_pd();
  for (; i + 4 <= n; i += 4) {
    const __m128 v = _mm_loadu_ps(q + i);
    const __m128d lo = _mm_cvtps_pd(v), hi = _mm_cvtps_pd(_mm_movehl_ps(v, v));
    a0 = _mm_add_pd(a0, lo);
    a1 = _mm_add_pd(a1, hi);
    b0 = _mm_add_pd(b0, _mm_mul_pd(lo, lo));
    b1 = _mm_add_pd(b1, _mm_mul_pd(hi, hi));
  }
  double ta[2], tb[2];
  _mm_storeu_pd(ta, _mm_add_pd(a0, a1));
  _mm_storeu_pd(tb, _mm_add_pd(b0, b1));
  a = ta[0] + ta[1];
  b = tb[0] + tb[1];
#endif
  for (; i < n; ++i) {
    const double v = q[i];
    a += v;
    b += v * v;
  }
  s1 += a;
  s2 += b;
}

} // namespace

Metric resolve(Metric m) noexcept { return m == Metric::auto_select ? Metric::tamura_gradient : m; }

const MetricInfo& info(Metric m) noexcept {
  for (const auto& i : infos)
    if (i.metric == m) return i;
  return infos[0];
}

std::span<const Metric> all_metrics() noexcept { return concrete; }

std::optional<Metric> parse_metric(std::string_view name) noexcept {
  for (const auto& i : infos)
    if (i.name == name) return i.metric;
  return std::nullopt;
}

bool is_moment_metric(Metric m) noexcept { return resolve(m) != Metric::spectral_energy; }

double metric_value(Metric m, const Moments& q) noexcept {
  constexpr double nan = std::numeric_limits<double>::quiet_NaN();
  if (!(q.n > 0)) return nan;
  const double mean = q.s1 / q.n;
  const double var = std::max(0.0, q.s2 / q.n - mean * mean);
  switch (resolve(m)) {
  case Metric::integrated_amplitude:
  case Metric::gradient_energy: return mean;
  case Metric::amplitude_variance:
  case Metric::laplacian_variance: return var;
  case Metric::tamura_amplitude:
  case Metric::tamura_gradient: return mean > 0 ? std::sqrt(std::sqrt(var) / mean) : nan;
  default: return nan;
  }
}

MetricEvaluator::MetricEvaluator(Metric metric, std::size_t h, std::size_t w, const Roi& roi, const Grid& grid,
                                 double band_low, double band_high)
    : metric_(resolve(metric)), h_(h), w_(w), roi_(roi) {
  if (h == 0 || w == 0) fail_config("focus metric: the field is empty");
  if (roi_.whole()) roi_ = Roi{0, 0, h, w};
  if (roi_.y + roi_.height > h || roi_.x + roi_.width > w)
    fail_config("focus metric: the region of interest (rows " + std::to_string(roi_.y) + "+" +
                std::to_string(roi_.height) + ", columns " + std::to_string(roi_.x) + "+" +
                std::to_string(roi_.width) + ") leaves the " + std::to_string(h) + "x" + std::to_string(w) +
                " frame");
  if (metric_ != Metric::spectral_energy) return;
  if (!(grid.dx > 0 && grid.dy > 0)) fail_config("focus metric: spectral-energy needs a positive pixel pitch");
  if (!(band_low >= 0 && band_high >= 0 && std::isfinite(band_low) && std::isfinite(band_high)))
    fail_config("focus metric: the spectral band limits must be non-negative frequencies");
  fh_ = fft::good_size(roi_.height);
  fw_ = fft::good_size(roi_.width);
  r2c_ = fft::plan_r2c(fh_, fw_);
  const std::size_t sw = fw_ / 2 + 1;
  band_.resize(fh_, sw);
  const double hi = band_high > 0 ? band_high : std::numeric_limits<double>::infinity();
  band_count_ = 0;
  for (std::size_t ky = 0; ky < fh_; ++ky)
    for (std::size_t kx = 0; kx < sw; ++kx) {
      const double fy = fft::bin_frequency(ky, fh_, grid.dy), fx = static_cast<double>(kx) / (fw_ * grid.dx);
      const double f = std::sqrt(fx * fx + fy * fy);
      const bool in = (kx != 0 || ky != 0) && f >= band_low && f <= hi;
      // Columns 1..(fw-1)/2 stand for themselves and their Hermitian twin.
      const unsigned char weight = !in ? 0 : (kx == 0 || 2 * kx == fw_) ? 1 : 2;
      band_(ky, kx) = weight;
      band_count_ += weight;
      if ((kx + ky) % 2 == 0) band_even_ += weight;
    }
  if (band_even_ == 0 || band_even_ == band_count_) fail_config("focus metric: the spectral band holds no frequency of the region of interest");
}

MetricEvaluator::Scratch MetricEvaluator::make_scratch() const {
  Scratch s;
  s.row = Image<float>(1, w_ + 4);
  s.mask = Image<float>(1, w_ + 4);
  if (metric_ == Metric::spectral_energy) {
    s.amplitude = Image<float>(fh_, fw_, 0.0f);
    s.spectrum = Image<cfloat>(fh_, fw_ / 2 + 1);
  }
  return s;
}

void MetricEvaluator::accumulate(ImageView<const cfloat> u, cfloat background, std::size_t y0, std::size_t x0,
                                 std::size_t y1, std::size_t x1, std::size_t tile, std::size_t ty0, std::size_t tx0,
                                 std::size_t tiles_x, Moments* tiles, ImageView<float> map, Scratch& s,
                                 std::size_t block) const {
  if (u.height() != h_ || u.width() != w_) fail_internal("focus metric: the field does not have the planned size");
  if (s.row.width() < w_) fail_internal("focus metric: the scratch was made by another evaluator");
  float* q = s.row.data();
  if (!map.empty()) {
    const std::size_t my1 = std::min(y1, h_ - 1), mx1 = std::min(x1, w_ - 1);
    for (std::size_t y = y0; y < my1; ++y)
      if (mx1 > x0) row_map(u, y, x0, mx1 - x0, map.row(y) + x0);
  }
  const Domain d = domain(metric_, h_, w_);
  const std::size_t ya = std::max(y0, d.y0), yb = std::min(y1, d.y1);
  const std::size_t xa = std::max(x0, d.x0), xb = std::min(x1, d.x1);
  if (ya >= yb || xa >= xb) return;
  if (block > 0) {
    // mask[i] = 1 where pixel column xa+i is in an even block column; in an
    // odd block row the blocks swap.
    float* mask = s.mask.data();
    for (std::size_t x = xa; x < xb; ++x) mask[x - xa] = (x / block) % 2 == 0 ? 1.0f : 0.0f;
    for (std::size_t y = ya; y < yb; ++y) {
      row_quantity(metric_, u, background, y, xa, xb - xa, q);
      const bool odd_row = (y / block) % 2 == 1;
      Moments* trow = tiles + 2 * ((y - ty0) / tile) * tiles_x;
      std::size_t x = xa;
      while (x < xb) {
        const std::size_t tx = (x - tx0) / tile;
        const std::size_t end = std::min(xb, tx0 + (tx + 1) * tile), len = end - x;
        double acc[4] = {0, 0, 0, 0}; // all, all², mask, mask²
        masked_sums(q + (x - xa), mask + (x - xa), len, acc);
        double ones = 0;
        for (std::size_t i = x - xa; i < end - xa; ++i) ones += mask[i];
        Moments& even = trow[2 * tx + (odd_row ? 1 : 0)];
        Moments& odd = trow[2 * tx + (odd_row ? 0 : 1)];
        even.n += ones;
        even.s1 += acc[2];
        even.s2 += acc[3];
        odd.n += static_cast<double>(len) - ones;
        odd.s1 += acc[0] - acc[2];
        odd.s2 += acc[1] - acc[3];
        x = end;
      }
    }
    return;
  }
  for (std::size_t y = ya; y < yb; ++y) {
    row_quantity(metric_, u, background, y, xa, xb - xa, q);
    Moments* trow = tiles + ((y - ty0) / tile) * tiles_x;
    std::size_t x = xa;
    while (x < xb) {
      const std::size_t tx = (x - tx0) / tile;
      const std::size_t end = std::min(xb, tx0 + (tx + 1) * tile);
      Moments& t = trow[tx];
      sums(q + (x - xa), end - x, t.s1, t.s2);
      t.n += static_cast<double>(end - x);
      x = end;
    }
  }
}

void MetricEvaluator::accumulate_split(ImageView<const cfloat> u, cfloat background, std::size_t tile, Moments& a,
                                       Moments& b, Scratch& s) const {
  if (u.height() != h_ || u.width() != w_) fail_internal("focus metric: the field does not have the planned size");
  if (s.row.width() < w_) fail_internal("focus metric: the scratch was made by another evaluator");
  a = b = Moments{};
  const Domain d = domain(metric_, h_, w_);
  const std::size_t ya = std::max(roi_.y, d.y0), yb = std::min(roi_.y + roi_.height, d.y1);
  const std::size_t xa = std::max(roi_.x, d.x0), xb = std::min(roi_.x + roi_.width, d.x1);
  if (ya >= yb || xa >= xb || tile == 0) return;
  float* q = s.row.data();
  float* mask = s.mask.data();
  const std::size_t n = xb - xa;
  std::size_t count_even = 0;
  for (std::size_t x = xa; x < xb; ++x) {
    const bool even = ((x - roi_.x) / tile) % 2 == 0;
    mask[x - xa] = even ? 1.0f : 0.0f;
    count_even += even;
  }
  const double ne = static_cast<double>(count_even);
  [[maybe_unused]] const bool grad = metric_ == Metric::tamura_gradient;
  [[maybe_unused]] bool fused = false; // pixel quantity and sums in one pass, 16 pixels at a time
  // Blocks of 8 from the first pixel: of every 16 pixels, 8 even then 8 odd.
  [[maybe_unused]] const bool aligned = tile == 8 && (xa - roi_.x) % 16 == 0;
  // Blocks of 1, 2, 4 or 8 at any phase: the same after reordering lanes.
  [[maybe_unused]] const bool periodic = !aligned && 16 % (2 * tile) == 0 && n >= 16;
#if defined(WAVESTACK_FOCUS_AVX2)
  fused = avx512::available() && fused_metric(metric_);
  avx512::LaneOrder order{};
  if (periodic) {
    int k = 0;
    for (int even = 1; even >= 0; --even)
      for (int j = 0; j < 16; ++j)
        if ((mask[j] != 0.0f) == (even == 1)) order.lane[k++] = j;
  }
#endif
#if defined(WAVESTACK_FOCUS_AVX2)
  if (fused) {
    using avx512::SplitMode;
    double out[2][4];
    std::size_t rows[2];
    const float br = background.real(), bi = background.imag();
    const std::size_t t = tile, y0 = roi_.y;
    if (grad)
      aligned    ? avx512::split_sums<true, SplitMode::aligned>(u, ya, yb, xa, n, y0, t, br, bi, mask, nullptr, out, rows)
      : periodic ? avx512::split_sums<true, SplitMode::permuted>(u, ya, yb, xa, n, y0, t, br, bi, mask, &order, out, rows)
                 : avx512::split_sums<true, SplitMode::masked>(u, ya, yb, xa, n, y0, t, br, bi, mask, nullptr, out, rows);
    else
      aligned    ? avx512::split_sums<false, SplitMode::aligned>(u, ya, yb, xa, n, y0, t, br, bi, mask, nullptr, out, rows)
      : periodic ? avx512::split_sums<false, SplitMode::permuted>(u, ya, yb, xa, n, y0, t, br, bi, mask, &order, out, rows)
                 : avx512::split_sums<false, SplitMode::masked>(u, ya, yb, xa, n, y0, t, br, bi, mask, nullptr, out, rows);
    // Even block-rows: even block-columns go to a; odd block-rows swap.
    for (int k = 0; k < 2; ++k) {
      const double r = static_cast<double>(rows[k]);
      const Moments even{ne * r, out[k][2], out[k][3]},
          odd{(static_cast<double>(n) - ne) * r, out[k][0] - out[k][2], out[k][1] - out[k][3]};
      (k ? b : a) += even;
      (k ? a : b) += odd;
    }
    return;
  }
#endif
  for (std::size_t y = ya; y < yb; ++y) {
    double acc[4] = {0, 0, 0, 0}; // all, all², even blocks, even blocks²
    std::size_t done = 0; // pixels summed
#if defined(WAVESTACK_FOCUS_AVX2)
    if (aligned && fused_metric(metric_) && avx2::available()) {
      done = avx2::aligned_split_sums(grad, reinterpret_cast<const float*>(u.row(y) + xa),
                                      grad ? reinterpret_cast<const float*>(u.row(y + 1) + xa) : nullptr,
                                      background.real(), background.imag(), n, acc);
    }
#endif
    if (done < n) {
      row_quantity(metric_, u, background, y, xa + done, n - done, q);
      masked_sums(q, mask + done, n - done, acc);
    }
    // Even block-rows: even block-columns go to a; odd block-rows swap.
    const bool odd_row = ((y - roi_.y) / tile) % 2 == 1;
    const Moments even{ne, acc[2], acc[3]}, odd{static_cast<double>(n) - ne, acc[0] - acc[2], acc[1] - acc[3]};
    (odd_row ? b : a) += even;
    (odd_row ? a : b) += odd;
  }
}

double MetricEvaluator::spectral(ImageView<const cfloat> u, cfloat background, Scratch& s, double* split) const {
  const std::size_t rh = roi_.height, rw = roi_.width;
  double sum = 0;
  for (std::size_t y = 0; y < rh; ++y) {
    float* a = s.amplitude.row(y);
    row_quantity(Metric::integrated_amplitude, u, background, roi_.y + y, roi_.x, rw, a);
    for (std::size_t x = 0; x < rw; ++x) sum += a[x];
  }
  const double n = static_cast<double>(rh * rw);
  const double mean = sum / n;
  if (!(mean > 0)) return std::numeric_limits<double>::quiet_NaN();
  const float m = static_cast<float>(mean);
  for (std::size_t y = 0; y < rh; ++y) {
    float* a = s.amplitude.row(y);
    for (std::size_t x = 0; x < rw; ++x) a[x] -= m;
  }
  r2c_->execute(s.amplitude.data(), s.spectrum.data());
  // |F|/sqrt(n) has the units of the pixel standard deviation (Parseval);
  // dividing by the mean makes it a relative contrast.
  const double scale = 1.0 / (std::sqrt(n) * mean);
  double e[2] = {0, 0};
  const std::size_t sw = fw_ / 2 + 1;
  for (std::size_t ky = 0; ky < fh_; ++ky) {
    const cfloat* f = s.spectrum.row(ky);
    const unsigned char* b = band_.row(ky);
    for (std::size_t kx = 0; kx < sw; ++kx)
      if (b[kx]) e[(kx + ky) % 2] += b[kx] * std::log1p(scale * amp(f[kx].real(), f[kx].imag()));
  }
  if (split) {
    const double ne = static_cast<double>(band_even_), no = static_cast<double>(band_count_ - band_even_);
    *split = 0.5 * (e[0] / ne - e[1] / no);
  }
  return (e[0] + e[1]) / static_cast<double>(band_count_);
}

double MetricEvaluator::operator()(ImageView<const cfloat> u, cfloat background, Scratch& s, double* split) const {
  if (u.height() != h_ || u.width() != w_) fail_internal("focus metric: the field does not have the planned size");
  if (metric_ == Metric::spectral_energy) {
    if (s.amplitude.height() != fh_ || s.amplitude.width() != fw_)
      fail_internal("focus metric: the scratch was made by another evaluator");
    return spectral(u, background, s, split);
  }
  Moments m;
#if defined(WAVESTACK_FOCUS_AVX2)
  if (avx512::available() && fused_metric(metric_)) {
    // One block holds the whole ROI: the split puts every pixel in a.
    Moments rest;
    accumulate_split(u, background, std::max(h_, w_) + 1, m, rest, s);
    m += rest;
    return metric_value(metric_, m);
  }
#endif
  accumulate(u, background, roi_.y, roi_.x, roi_.y + roi_.height, roi_.x + roi_.width,
             std::max(h_, w_) + 1, roi_.y, roi_.x, 1, &m, ImageView<float>(), s);
  return metric_value(metric_, m);
}

} // namespace wavestack::focus
