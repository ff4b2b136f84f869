// Located reading of TOML values for the config parsers (config.cpp and
// entangle.cpp): every failure is one line "SOURCE:LINE: key.path: problem".
#pragma once
#include <toml++/toml.h>

#include <cstdint>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include "config.hpp"

namespace toral {

inline constexpr std::int64_t kMaxScan = 10'000'000;  // values in one scanned list or range

class Ctx {
 public:
  explicit Ctx(std::string source) : source_(std::move(source)) {}
  [[noreturn]] void fail(std::int64_t line, const std::string& key, const std::string& what) const {
    std::ostringstream os;
    os << source_;
    if (line > 0) os << ':' << line;
    os << ": " << (key.empty() ? "" : key + ": ") << what;
    throw ConfigError(os.str());
  }
  [[noreturn]] void fail(const toml::node& n, const std::string& key, const std::string& what) const {
    fail(line(n), key, what);
  }
  static std::int64_t line(const toml::node& n) { return static_cast<std::int64_t>(n.source().begin.line); }

  // Rejects keys outside `allowed` in table `t` (named `path`).
  void only_keys(const toml::table& t, const std::string& path, std::set<std::string> allowed) const {
    for (auto&& [k, v] : t) {
      const std::string key(k.str());
      if (!allowed.count(key)) {
        std::string list;
        for (const auto& a : allowed) list += (list.empty() ? "" : ", ") + a;
        fail(static_cast<std::int64_t>(k.source().begin.line), path.empty() ? key : path + "." + key,
             "unknown key (allowed here: " + list + ")");
      }
    }
  }

  std::int64_t integer(const toml::node& n, const std::string& key) const {
    if (!n.is_integer()) fail(n, key, std::string("must be an integer, not ") + type_name(n));
    return n.as_integer()->get();
  }
  std::string string(const toml::node& n, const std::string& key) const {
    if (!n.is_string()) fail(n, key, std::string("must be a string, not ") + type_name(n));
    return n.as_string()->get();
  }
  bool boolean(const toml::node& n, const std::string& key) const {
    if (!n.is_boolean()) fail(n, key, std::string("must be true or false, not ") + type_name(n));
    return n.as_boolean()->get();
  }
  const toml::table& table(const toml::node& n, const std::string& key) const {
    if (!n.is_table()) fail(n, key, std::string("must be a table, not ") + type_name(n));
    return *n.as_table();
  }
  std::string choice(const toml::node& n, const std::string& key, std::initializer_list<const char*> options) const {
    const std::string s = string(n, key);
    std::string list;
    for (const char* o : options) {
      if (s == o) return s;
      list += (list.empty() ? "" : ", ") + std::string("\"") + o + "\"";
    }
    fail(n, key, "\"" + s + "\" is not one of " + list);
  }

  // An integer, a list of integers, or a range table {from, to, step}.
  std::vector<std::int64_t> int_values(const toml::node& n, const std::string& key) const {
    std::vector<std::int64_t> out;
    if (n.is_integer()) {
      out.push_back(n.as_integer()->get());
    } else if (n.is_array()) {
      const auto& a = *n.as_array();
      for (const auto& e : a) out.push_back(integer(e, key));
    } else if (n.is_table()) {
      const auto& t = *n.as_table();
      only_keys(t, key, {"from", "to", "step"});
      if (!t.get("from") || !t.get("to")) fail(n, key, "a range needs both 'from' and 'to'");
      const std::int64_t from = integer(*t.get("from"), key + ".from");
      const std::int64_t to = integer(*t.get("to"), key + ".to");
      const std::int64_t step = t.get("step") ? integer(*t.get("step"), key + ".step") : (to >= from ? 1 : -1);
      if (step == 0) fail(*t.get("step"), key + ".step", "must not be 0");
      if ((to - from) / step >= kMaxScan) fail(n, key, "range has more than 10^7 values");
      for (std::int64_t v = from; step > 0 ? v <= to : v >= to; v += step) out.push_back(v);
    } else {
      fail(n, key, std::string("must be an integer, a list of integers or a range {from, to, step}, not ") +
                       type_name(n));
    }
    if (out.empty()) fail(n, key, "empty scan: no values");
    if (static_cast<std::int64_t>(out.size()) > kMaxScan) fail(n, key, "more than 10^7 values");
    return out;
  }

  static const char* type_name(const toml::node& n) {
    switch (n.type()) {
      case toml::node_type::table: return "a table";
      case toml::node_type::array: return "an array";
      case toml::node_type::string: return "a string";
      case toml::node_type::integer: return "an integer";
      case toml::node_type::floating_point: return "a float";
      case toml::node_type::boolean: return "a boolean";
      default: return "a date/time";
    }
  }

 private:
  std::string source_;
};

}  // namespace toral
