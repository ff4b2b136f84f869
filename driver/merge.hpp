// `toral merge`: shards of one run (same config) into one result file.
#pragma once
#include <string>
#include <vector>

namespace toral {

// Reads every input, checks that they are valid toral files of the same
// config and layout, that no point is missing, duplicated or pending, and
// writes `output` (temporary + rename: no partial output on any failure).
// Throws ResultFileError with a one-line message naming the file and the problem.
void merge_results(const std::vector<std::string>& inputs, const std::string& output, bool overwrite);

}  // namespace toral
