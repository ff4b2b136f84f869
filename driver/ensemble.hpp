// Ensemble statistics: points that differ only in their seed form a group;
// each group gets count, mean, std, sem and median of the chaos quantities
// and of every bound. Uses only records and axes, so `merge` can rebuild it.
#pragma once
#include <vector>

#include "record.hpp"

namespace toral {

// Empty (no groups) when no point has a seed.
EnsembleStats ensemble_stats(const RunAxes& axes, const std::vector<PointRecord>& records);

}  // namespace toral
