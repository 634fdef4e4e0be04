#pragma once
// Which SIMD kernels the focus module runs: the widest the CPU supports
// (AVX-512F, else AVX2, else the SSE2/scalar loops), decided once per
// process. WAVESTACK_FOCUS_ISA=avx2 or sse2 caps it, so the tests run the
// narrower kernels on a machine that has wider ones (they are what AVX2-only
// CPUs run); other values are ignored.
namespace wavestack::focus::detail {

enum class Isa { sse2, avx2, avx512 };

Isa isa() noexcept;

} // namespace wavestack::focus::detail
