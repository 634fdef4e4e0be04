#include "wavestack/unwrap/reliability.hpp"

#include "wavestack/core/error.hpp"
#include "wavestack/unwrap/wrap.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <cstring>
#include <limits>
#include <string>

namespace wavestack::unwrap {

namespace {

using Node = ReliabilityUnwrapper::Workspace::Node;

constexpr std::size_t max_pixels = std::size_t(1) << 28;
constexpr int digit_bits = 11;
constexpr std::uint32_t digit_mask = (1u << digit_bits) - 1;
constexpr int digits = 3; // 3 × 11 bits ≥ 32
constexpr std::size_t buckets = std::size_t(1) << digit_bits;
constexpr std::int32_t based_root = std::numeric_limits<std::int32_t>::min();

inline std::uint32_t float_bits(float f) noexcept {
  std::uint32_t u;
  std::memcpy(&u, &f, sizeof u);
  return u;
}

/// 2π increment of the edge p → q (scikit-image's find_wrap): the number of
/// cycles to add to q relative to p is −e with e = −1 when φp − φq > π,
/// +1 when < −π, else 0. Stored as e + 1 in two bits.
inline std::uint32_t increment_code(float pp, float pq) noexcept {
  const float d = pp - pq;
  return d > pi_f ? 0u : (d < -pi_f ? 2u : 1u);
}

/// Find with path halving; returns the root and adds k[x] − k[root] to acc.
inline std::int32_t find(Node* nodes, std::int32_t x, std::int32_t& acc) noexcept {
  for (;;) {
    const std::int32_t p = nodes[x].parent;
    if (p < 0) return x;
    const std::int32_t g = nodes[p].parent;
    if (g < 0) {
      acc += nodes[x].offset;
      return p;
    }
    nodes[x].offset += nodes[p].offset;
    nodes[x].parent = g;
    acc += nodes[x].offset;
    x = g;
  }
}

inline float second_difference(float l, float c, float r) noexcept {
  return wrap_difference(l - c) - wrap_difference(c - r);
}

} // namespace

ReliabilityUnwrapper::ReliabilityUnwrapper(std::size_t h, std::size_t w, ReliabilityOptions options)
    : h_(h), w_(w), opt_(options) {
  if (h == 0 || w == 0) fail_config("reliability unwrapping needs a non-empty frame");
  if (h * w >= max_pixels)
    fail_config("reliability unwrapping supports frames of fewer than 2^28 pixels, got " + std::to_string(h) +
                "x" + std::to_string(w));
}

ReliabilityUnwrapper::Workspace ReliabilityUnwrapper::make_workspace() const {
  Workspace ws;
  ws.phase.resize(h_, w_);
  ws.measure.resize(h_, w_);
  ws.valid.resize(h_, w_);
  const std::size_t n = h_ * w_;
  ws.edges.resize(2 * n);
  ws.scratch.resize(2 * n);
  ws.nodes.resize(n);
  return ws;
}

ReliabilityStats ReliabilityUnwrapper::apply(ImageView<const float> wrapped, ImageView<float> out,
                                             Workspace& ws) const {
  return run(wrapped, nullptr, out, ws);
}

ReliabilityStats ReliabilityUnwrapper::apply(ImageView<const float> wrapped, ImageView<const std::uint8_t> valid,
                                             ImageView<float> out, Workspace& ws) const {
  return run(wrapped, &valid, out, ws);
}

ReliabilityStats ReliabilityUnwrapper::run(ImageView<const float> in, const ImageView<const std::uint8_t>* mask,
                                           ImageView<float> out, Workspace& ws) const {
  const std::size_t h = h_, w = w_, n = h * w;
  auto same = [&](std::size_t hh, std::size_t ww) { return hh == h && ww == w; };
  if (!same(in.height(), in.width()) || !same(out.height(), out.width()) ||
      (mask && !same(mask->height(), mask->width())))
    fail_internal("reliability unwrapping: image shapes differ from the planned " + std::to_string(h) + "x" +
                  std::to_string(w));
  if (!same(ws.phase.height(), ws.phase.width()) || !same(ws.measure.height(), ws.measure.width()) ||
      !same(ws.valid.height(), ws.valid.width()) || ws.edges.size() < 2 * n || ws.scratch.size() < 2 * n ||
      ws.nodes.size() < n)
    fail_internal("reliability unwrapping: the workspace was made for another frame size");

  float* ph = ws.phase.data();
  float* m = ws.measure.data();
  std::uint8_t* ok = ws.valid.data();

  // 1. Wrap the input and decide which pixels take part.
  std::size_t valid_pixels = 0;
  for (std::size_t y = 0; y < h; ++y) {
    const float* src = in.row(y);
    const std::uint8_t* mk = mask ? mask->row(y) : nullptr;
    float* dst = ph + y * w;
    std::uint8_t* v = ok + y * w;
    for (std::size_t x = 0; x < w; ++x) {
      const float s = src[x];
      const bool use = std::isfinite(s) && (!mk || mk[x] != 0);
      v[x] = use ? 1 : 0;
      dst[x] = use ? wrap(s) : 0.f;
      valid_pixels += use;
    }
  }
  const bool all_valid = valid_pixels == n;

  // 2. Second-difference measure D² per pixel.
  const bool wy = opt_.wrap_y && h >= 3, wx = opt_.wrap_x && w >= 3;
  // Generic evaluation for pixels on the frame border: neighbours through
  // wrap-around where enabled, border_measure where a neighbour is missing.
  auto generic = [&](std::size_t y, std::size_t x) -> float {
    std::size_t ys[3], xs[3];
    if (y == 0) {
      if (!wy) return border_measure;
      ys[0] = h - 1;
    } else {
      ys[0] = y - 1;
    }
    if (y + 1 == h) {
      if (!wy) return border_measure;
      ys[2] = 0;
    } else {
      ys[2] = y + 1;
    }
    if (x == 0) {
      if (!wx) return border_measure;
      xs[0] = w - 1;
    } else {
      xs[0] = x - 1;
    }
    if (x + 1 == w) {
      if (!wx) return border_measure;
      xs[2] = 0;
    } else {
      xs[2] = x + 1;
    }
    ys[1] = y;
    xs[1] = x;
    if (!all_valid)
      for (std::size_t a = 0; a < 3; ++a)
        for (std::size_t b = 0; b < 3; ++b)
          if (!ok[ys[a] * w + xs[b]]) return border_measure;
    auto P = [&](int a, int b) { return ph[ys[a] * w + xs[b]]; };
    const float c = P(1, 1);
    const float H = second_difference(P(1, 0), c, P(1, 2));
    const float V = second_difference(P(0, 1), c, P(2, 1));
    const float D1 = second_difference(P(0, 0), c, P(2, 2));
    const float D2 = second_difference(P(0, 2), c, P(2, 0));
    return H * H + V * V + D1 * D1 + D2 * D2;
  };
  for (std::size_t y = 0; y < h; ++y) {
    float* mr = m + y * w;
    const bool interior_row = y > 0 && y + 1 < h;
    if (interior_row && w >= 3) {
      const float* u = ph + (y - 1) * w;
      const float* c = ph + y * w;
      const float* d = ph + (y + 1) * w;
      for (std::size_t x = 1; x + 1 < w; ++x) {
        const float cc = c[x];
        const float H = second_difference(c[x - 1], cc, c[x + 1]);
        const float V = second_difference(u[x], cc, d[x]);
        const float D1 = second_difference(u[x - 1], cc, d[x + 1]);
        const float D2 = second_difference(u[x + 1], cc, d[x - 1]);
        mr[x] = H * H + V * V + D1 * D1 + D2 * D2;
      }
      if (!all_valid) {
        const std::uint8_t* vu = ok + (y - 1) * w;
        const std::uint8_t* vc = ok + y * w;
        const std::uint8_t* vd = ok + (y + 1) * w;
        for (std::size_t x = 1; x + 1 < w; ++x) {
          const unsigned all = vu[x - 1] & vu[x] & vu[x + 1] & vc[x - 1] & vc[x] & vc[x + 1] & vd[x - 1] &
                               vd[x] & vd[x + 1];
          if (!all) mr[x] = border_measure;
        }
      }
      mr[0] = generic(y, 0);
      mr[w - 1] = generic(y, w - 1);
    } else {
      for (std::size_t x = 0; x < w; ++x) mr[x] = generic(y, x);
    }
  }

  // 3. Edges (key = float bits, payload = pixel << 4 | kind << 2 | increment)
  //    with the digit histograms of the radix sort.
  // kind: 0 right, 1 right across the wrap, 2 down, 3 down across the wrap.
  const std::ptrdiff_t iw = static_cast<std::ptrdiff_t>(w);
  const std::array<std::ptrdiff_t, 4> step{1, 1 - iw, iw, -static_cast<std::ptrdiff_t>((h - 1) * w)};
  const bool edge_wx = opt_.wrap_x && w >= 3, edge_wy = opt_.wrap_y && h >= 3;
  std::array<std::array<std::uint32_t, buckets>, digits> hist{};
  std::uint64_t* E = ws.edges.data();
  std::size_t ne = 0;
  const bool by_reliability = opt_.order == EdgeOrder::summed_reliability;
  auto emit = [&](std::size_t p, std::size_t q, std::uint32_t kind) {
    float key;
    if (by_reliability) {
      const float r = 1.f / std::sqrt(m[p]) + 1.f / std::sqrt(m[q]);
      key = 1.f / r; // most reliable first; r = inf (D = 0) gives 0
    } else {
      key = m[p] + m[q];
    }
    const std::uint32_t k = float_bits(key);
    const std::uint32_t payload = static_cast<std::uint32_t>(p) << 4 | kind << 2 | increment_code(ph[p], ph[q]);
    E[ne++] = static_cast<std::uint64_t>(k) << 32 | payload;
    ++hist[0][k & digit_mask];
    ++hist[1][(k >> digit_bits) & digit_mask];
    ++hist[2][k >> (2 * digit_bits)];
  };
  for (std::size_t y = 0; y < h; ++y) {
    const std::size_t row = y * w;
    const bool has_down = y + 1 < h;
    for (std::size_t x = 0; x < w; ++x) {
      const std::size_t p = row + x;
      if (!ok[p]) continue;
      if (x + 1 < w) {
        if (ok[p + 1]) emit(p, p + 1, 0);
      } else if (edge_wx) {
        if (ok[row]) emit(p, row, 1);
      }
      if (has_down) {
        if (ok[p + w]) emit(p, p + w, 2);
      } else if (edge_wy) {
        if (ok[x]) emit(p, x, 3);
      }
    }
  }

  // 4. Stable LSD radix sort on the 32-bit key (ascending).
  std::uint64_t* src = ws.edges.data();
  std::uint64_t* dst = ws.scratch.data();
  for (int d = 0; d < digits; ++d) {
    auto& hd = hist[d];
    bool trivial = false;
    for (std::size_t b = 0; b < buckets; ++b) {
      if (hd[b] == ne) trivial = true;
      if (hd[b] != 0) break;
    }
    if (trivial || ne == 0) continue; // every key has the same digit
    std::array<std::uint32_t, buckets> pos;
    std::uint32_t sum = 0;
    for (std::size_t b = 0; b < buckets; ++b) {
      pos[b] = sum;
      sum += hd[b];
    }
    const int shift = 32 + d * digit_bits;
    for (std::size_t i = 0; i < ne; ++i) {
      const std::uint64_t e = src[i];
      dst[pos[(e >> shift) & digit_mask]++] = e;
    }
    std::swap(src, dst);
  }

  // 5. Merge groups from the most to the least reliable edge.
  Node* nodes = ws.nodes.data();
  for (std::size_t p = 0; p < n; ++p) nodes[p] = Node{-1, 0};
  const std::size_t needed = valid_pixels > 0 ? valid_pixels - 1 : 0;
  std::size_t merges = 0;
  constexpr std::size_t ahead = 16;
  for (std::size_t i = 0; i < ne && merges < needed; ++i) {
    if (i + ahead < ne) {
      const std::uint32_t pa = static_cast<std::uint32_t>(src[i + ahead]);
      const std::ptrdiff_t a = static_cast<std::ptrdiff_t>(pa >> 4);
      __builtin_prefetch(nodes + a, 1);
      __builtin_prefetch(nodes + a + step[(pa >> 2) & 3], 1);
    }
    const std::uint32_t pl = static_cast<std::uint32_t>(src[i]);
    const std::int32_t p = static_cast<std::int32_t>(pl >> 4);
    const std::int32_t q = static_cast<std::int32_t>(p + step[(pl >> 2) & 3]);
    const std::int32_t e = static_cast<std::int32_t>(pl & 3) - 1;
    std::int32_t op = 0, oq = 0;
    const std::int32_t rp = find(nodes, p, op);
    const std::int32_t rq = find(nodes, q, oq);
    if (rp == rq) continue;
    // Wanted: k[q] = k[p] − e, with k[p] = K[rp] + op and k[q] = K[rq] + oq.
    const std::int32_t sp = -nodes[rp].parent, sq = -nodes[rq].parent;
    if (sp >= sq) {
      nodes[rp].parent = -(sp + sq);
      nodes[rq].parent = rp;
      nodes[rq].offset = op - e - oq;
    } else {
      nodes[rq].parent = -(sp + sq);
      nodes[rp].parent = rq;
      nodes[rp].offset = oq + e - op;
    }
    ++merges;
  }

  // 6. Resolve offsets, anchor each group at its first pixel in raster
  //    order, write the result.
  ReliabilityStats st;
  st.valid_pixels = valid_pixels;
  st.edges = ne;
  for (std::size_t y = 0; y < h; ++y) {
    const float* src_row = in.row(y);
    float* o = out.row(y);
    for (std::size_t x = 0; x < w; ++x) {
      const std::size_t p = y * w + x;
      if (!ok[p]) {
        o[x] = opt_.invalid_value ? *opt_.invalid_value : src_row[x];
        continue;
      }
      std::int32_t acc = 0;
      const std::int32_t r = find(nodes, static_cast<std::int32_t>(p), acc);
      if (nodes[r].parent != based_root) {
        const std::size_t size = static_cast<std::size_t>(-static_cast<std::int64_t>(nodes[r].parent));
        ++st.groups;
        st.largest_group = std::max(st.largest_group, size);
        nodes[r].parent = based_root;
        nodes[r].offset = -acc; // this pixel gets k = 0
      }
      const std::int32_t k = acc + nodes[r].offset;
      o[x] = ph[p] + static_cast<float>(two_pi * k);
    }
  }
  return st;
}

} // namespace wavestack::unwrap
