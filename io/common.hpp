// Pieces of io/ shared by the result file and the resume journal that need
// neither MPI nor HDF5: the error type and the FNV-1a-64 checksum.
#pragma once
#include <cstddef>
#include <cstdint>
#include <stdexcept>
#include <string>
#include <string_view>

namespace toral {

// Any failure of the result file / journal code other than HDF5's own (those
// are h5::Error): bad arguments, refused targets, invalid or corrupt files.
// The message is one line and names the file.
struct ResultFileError : std::runtime_error {
  using std::runtime_error::runtime_error;
};

constexpr std::uint64_t kFnv1a64Offset = 0xcbf29ce484222325ull;
constexpr std::uint64_t kFnv1a64Prime = 0x100000001b3ull;

// FNV-1a, 64 bit, over `n` bytes; `h` continues a running hash. (Same
// function as toral::fnv1a64(const std::string&) of kernels/families.hpp;
// named differently so that the two never compete in overload resolution.)
inline std::uint64_t fnv1a64_bytes(const void* data, std::size_t n,
                                   std::uint64_t h = kFnv1a64Offset) {
  const auto* p = static_cast<const unsigned char*>(data);
  for (std::size_t i = 0; i < n; ++i) {
    h ^= p[i];
    h *= kFnv1a64Prime;
  }
  return h;
}

// RunMeta::config_hash of a configuration text: FNV-1a-64 of its bytes as 16
// lower-case hex digits, e.g. "af63bd4c8601b7df".
inline std::string config_hash_of(std::string_view config_text) {
  static const char* digits = "0123456789abcdef";
  std::uint64_t h = fnv1a64_bytes(config_text.data(), config_text.size());
  std::string s(16, '0');
  for (int i = 15; i >= 0; --i, h >>= 4) s[static_cast<std::size_t>(i)] = digits[h & 0xf];
  return s;
}

}  // namespace toral
