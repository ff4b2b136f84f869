// Producing a file atomically (internal to io/): it is written to a sibling
// temporary and then published onto its final path in one step (rename, or a
// hard link), so that a reader sees either the old file or the whole new one,
// never a partial one. Without overwrite an existing file is never replaced.
// Used by the result file writer (result_write.cpp) and the resume journal
// (journal.cpp). Local, not collective; no MPI, no HDF5.
#pragma once
#include <string>
#include <utility>

namespace toral::atomic_file {

// Error kinds of the checks below (the result writer agrees on them between
// ranks).
enum : int { kOk = 0, kExists = 1, kOther = 2 };

// (kind, message); {kOk, ""} when fine.
using Problem = std::pair<int, std::string>;

// Rank-0-local check of the output target; returns (kind, message).
Problem target_problem(const std::string& path, bool overwrite);

// A fresh sibling name for the temporary of `path`:
// `path + "." + tag + "." + <pid> + "." + <random hex>`.
std::string temp_name(const std::string& path, const std::string& tag = "partial");

// Moves tmp onto path, replacing whatever is there (rename(2), atomic).
// Returns false with errno set on failure.
bool replace(const std::string& tmp, const std::string& path);

// Moves tmp onto path. Without overwrite, never replaces an existing file.
Problem publish(const std::string& tmp, const std::string& path, bool overwrite);

}  // namespace toral::atomic_file
