// Number and JSON formatting shared by the human-facing output (report.cpp,
// entangle.cpp).
#pragma once
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <iomanip>
#include <sstream>
#include <string>
#include <vector>

namespace toral {

// A number for people: `prec` significant digits, nan/inf spelled out.
inline std::string num(double x, int prec = 6) {
  if (std::isnan(x)) return "nan";
  if (std::isinf(x)) return x > 0 ? "inf" : "-inf";
  std::ostringstream os;
  os << std::setprecision(prec) << x;
  return os.str();
}

// A JSON number with full precision; null for NaN and infinities.
inline std::string json_num(double x) {
  if (!std::isfinite(x)) return "null";
  std::ostringstream os;
  os << std::setprecision(17) << x;
  return os.str();
}

inline std::string json_str(const std::string& s) {
  std::string o = "\"";
  for (char ch : s) {
    if (ch == '"' || ch == '\\') {
      o += '\\';
      o += ch;
    } else if (static_cast<unsigned char>(ch) < 0x20) {
      char buf[8];
      std::snprintf(buf, sizeof buf, "\\u%04x", ch);
      o += buf;
    } else {
      o += ch;
    }
  }
  return o + "\"";
}

inline std::string json_array(const std::vector<double>& v) {
  std::string o = "[";
  for (std::size_t i = 0; i < v.size(); ++i) o += (i ? ", " : "") + json_num(v[i]);
  return o + "]";
}

inline std::string json_array(const std::vector<std::int64_t>& v) {
  std::string o = "[";
  for (std::size_t i = 0; i < v.size(); ++i) o += (i ? ", " : "") + std::to_string(v[i]);
  return o + "]";
}

}  // namespace toral
