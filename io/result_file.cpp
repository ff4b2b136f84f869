// The result file's public tables (status, method and solver labels) and
// iso8601_utc_now. The rest of result_file.hpp lives in: atomic_file.cpp
// (output_exists, the temporary file and its atomic publication),
// result_validate.cpp (validation of records and stats), result_write.cpp
// (write_results, check_output_target) and result_read.cpp (read_results);
// their shared internal declarations are in result_internal.hpp.
#include "result_file.hpp"

#include <ctime>

namespace toral {

// ---------------------------------------------------------------- public

const std::vector<std::string>& status_labels() {
  static const std::vector<std::string> v{"ok",        "invalid_model",  "overflow", "solver_failed",
                                          "no_method", "internal_error", "pending",
                                          "diagnostic_failed", "inaccurate"};
  return v;
}

const std::vector<std::string>& method_labels() {
  static const std::vector<std::string> v{"none", "bloch", "dense", "krylov", "tangent"};
  return v;
}

const std::vector<std::string>& solver_labels() {
  static const std::vector<std::string> v{"none",         "lapack",       "bloch_exact",
                                          "krylov_schur", "shift_invert", "tangent"};
  return v;
}

std::string iso8601_utc_now() {
  const std::time_t t = std::time(nullptr);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y-%m-%dT%H:%M:%SZ", &tm);
  return buf;
}

}  // namespace toral
