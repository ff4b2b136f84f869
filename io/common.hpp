// Pieces of io/ shared by the result file and the resume journal that need
// neither MPI nor HDF5: the error type and the config hash (FNV-1a-64,
// kernels/fnv1a.hpp).
#pragma once
#include <cstddef>
#include <cstdint>
#include <stdexcept>
#include <string>
#include <string_view>

#include "fnv1a.hpp"  // kernels/, header-only

namespace toral {

// Any failure of the result file / journal code other than HDF5's own (those
// are h5::Error): bad arguments, refused targets, invalid or corrupt files.
// The message is one line and names the file.
struct ResultFileError : std::runtime_error {
  using std::runtime_error::runtime_error;
};

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
