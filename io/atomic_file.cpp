#include "atomic_file.hpp"

#include <fcntl.h>
#include <unistd.h>

#include <cerrno>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <random>
#include <sstream>

#include "result_file.hpp"  // output_exists (public API, defined here)

namespace toral {

namespace fs = std::filesystem;

bool output_exists(const std::string& path) {
  std::error_code ec;
  const fs::file_status st = fs::symlink_status(path, ec);
  return fs::exists(st) || fs::is_symlink(st);
}

namespace atomic_file {

Problem target_problem(const std::string& path, bool overwrite) {
  if (path.empty()) return {kOther, "output path is empty"};
  std::error_code ec;
  const fs::path p(path);
  fs::path dir = p.parent_path();
  if (dir.empty()) dir = ".";
  if (!fs::is_directory(dir, ec))
    return {kOther, "output directory '" + dir.string() + "' of '" + path + "' does not exist"};
  if (::access(dir.c_str(), W_OK | X_OK) != 0)
    return {kOther, "output directory '" + dir.string() + "' of '" + path + "' is not writable"};
  const fs::file_status st = fs::symlink_status(p, ec);
  if (fs::exists(st) || fs::is_symlink(st)) {
    if (fs::is_directory(fs::status(p, ec)))
      return {kOther, "output path '" + path + "' is a directory"};
    if (!overwrite)
      return {kExists, "output file '" + path +
                           "' already exists; refusing to overwrite it (pass --overwrite to "
                           "replace it)"};
  }
  return {kOk, {}};
}

std::string temp_name(const std::string& path, const std::string& tag) {
  std::random_device rd;
  std::ostringstream s;
  s << path << "." << tag << "." << ::getpid() << "." << std::hex << (rd() & 0xffffffu);
  return s.str();
}

bool replace(const std::string& tmp, const std::string& path) {
  return std::rename(tmp.c_str(), path.c_str()) == 0;
}

Problem publish(const std::string& tmp, const std::string& path, bool overwrite) {
  auto sys = [&](const char* what) {
    return std::string(what) + " '" + tmp + "' -> '" + path + "' failed: " + std::strerror(errno);
  };
  auto exists_msg = [&] {
    return "output file '" + path +
           "' appeared while the run was writing; refusing to overwrite it (pass --overwrite to "
           "replace it)";
  };
  if (overwrite) {
    if (!replace(tmp, path)) return {kOther, sys("rename")};
    return {kOk, {}};
  }
  if (::renameat2(AT_FDCWD, tmp.c_str(), AT_FDCWD, path.c_str(), RENAME_NOREPLACE) == 0)
    return {kOk, {}};
  if (errno == EEXIST) return {kExists, exists_msg()};
  if (errno != EINVAL && errno != ENOSYS && errno != ENOTSUP && errno != EPERM)
    return {kOther, sys("rename")};
  // The file system lacks RENAME_NOREPLACE: a hard link is also atomic.
  if (::link(tmp.c_str(), path.c_str()) == 0) {
    ::unlink(tmp.c_str());
    return {kOk, {}};
  }
  if (errno == EEXIST) return {kExists, exists_msg()};
  // No hard links either: check, then rename (a small race remains).
  if (output_exists(path)) return {kExists, exists_msg()};
  if (!replace(tmp, path)) return {kOther, sys("rename")};
  return {kOk, {}};
}

}  // namespace atomic_file

}  // namespace toral
