// Sample statistics of a list of values (ensemble averages over seeds).
#pragma once
#include <vector>

namespace toral {

struct SampleStats {
  double mean, std, sem, median;  // std: sample standard deviation (ddof = 1)
};

// NaN for mean/median of an empty list and for std/sem with fewer than two
// values; a NaN among the values propagates to every statistic.
SampleStats sample_stats(std::vector<double> values);

}  // namespace toral
