// FNV-1a, 64 bit (Fowler, Noll & Vo; the offset basis and prime are the
// published 64-bit parameters). Header-only, so that io/ (checksums of the
// journal, the config hash) and the kernels (disorder stream keys) share one
// definition without io linking the kernels library.
#pragma once
#include <cstddef>
#include <cstdint>

namespace toral {

constexpr std::uint64_t kFnv1a64Offset = 0xcbf29ce484222325ull;
constexpr std::uint64_t kFnv1a64Prime = 0x100000001b3ull;

// FNV-1a-64 over `n` bytes; `h` continues a running hash.
inline std::uint64_t fnv1a64_bytes(const void* data, std::size_t n, std::uint64_t h = kFnv1a64Offset) {
  const auto* p = static_cast<const unsigned char*>(data);
  for (std::size_t i = 0; i < n; ++i) {
    h ^= p[i];
    h *= kFnv1a64Prime;
  }
  return h;
}

}  // namespace toral
