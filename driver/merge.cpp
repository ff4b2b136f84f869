#include "merge.hpp"

#include <mpi.h>

#include <algorithm>
#include <map>

#include "ensemble.hpp"
#include "result_file.hpp"

namespace toral {

namespace {

bool same_axes(const RunAxes& a, const RunAxes& b) {
  return a.param_names == b.param_names && a.region_sizes == b.region_sizes && a.local_dims == b.local_dims &&
         a.hist_bins == b.hist_bins && a.bulk_limit == b.bulk_limit;
}

}  // namespace

void merge_results(const std::vector<std::string>& inputs, const std::string& output, bool overwrite) {
  if (inputs.empty()) throw ResultFileError("merge: no input files");
  std::vector<ResultData> parts;
  parts.reserve(inputs.size());
  for (const auto& in : inputs) {
    if (in == output) throw ResultFileError(in + ": an input cannot also be the output");
    parts.push_back(read_results(in));
  }
  const ResultData& first = parts.front();
  std::map<std::int64_t, std::size_t> owner;  // point index -> input
  std::vector<PointRecord> all;
  for (std::size_t k = 0; k < parts.size(); ++k) {
    const ResultData& d = parts[k];
    if (d.meta.config_hash != first.meta.config_hash)
      throw ResultFileError(inputs[k] + ": written by a different config (hash " + d.meta.config_hash + ", " +
                            inputs[0] + " has " + first.meta.config_hash + ")");
    if (d.axes.schema.hash() != first.axes.schema.hash())
      throw ResultFileError(inputs[k] + ": its diagnostics' schema (hash " + d.axes.schema.hash() + ") differs from " +
                            inputs[0] + " (hash " + first.axes.schema.hash() + ")");
    if (d.meta.total_points != first.meta.total_points || !same_axes(d.axes, first.axes))
      throw ResultFileError(inputs[k] + ": its layout (points, parameters or bounds axes) differs from " + inputs[0]);
    for (const auto& r : d.records) {
      if (r.status == static_cast<std::int32_t>(PointStatus::Pending))
        throw ResultFileError(inputs[k] + ": point " + std::to_string(r.index) +
                              " is pending (an unfinished shard: finish it with run --resume first)");
      const auto [it, fresh] = owner.emplace(r.index, k);
      if (!fresh)
        throw ResultFileError(inputs[k] + ": point " + std::to_string(r.index) + " is also in " + inputs[it->second]);
      all.push_back(r);
    }
  }
  const std::int64_t total = first.meta.total_points;
  std::vector<std::int64_t> missing;
  for (std::int64_t i = 0; i < total; ++i)
    if (!owner.count(i)) missing.push_back(i);
  if (!missing.empty()) {
    std::string list;
    for (std::size_t i = 0; i < std::min<std::size_t>(missing.size(), 8); ++i)
      list += (i ? ", " : "") + std::to_string(missing[i]);
    throw ResultFileError("merge: " + std::to_string(missing.size()) + " of " + std::to_string(total) +
                          " points are in no input (" + list + (missing.size() > 8 ? ", ..." : "") + ")");
  }
  if (static_cast<std::int64_t>(owner.size()) != total || owner.rbegin()->first >= total)
    throw ResultFileError("merge: inputs hold points outside 0.." + std::to_string(total - 1));
  std::sort(all.begin(), all.end(), [](const PointRecord& a, const PointRecord& b) { return a.index < b.index; });
  for (auto& r : all) r.row = r.index;
  RunMeta meta = first.meta;
  meta.shard = "";
  meta.created = iso8601_utc_now();
  for (const auto& d : parts) meta.ranks = std::max(meta.ranks, d.meta.ranks);
  const EnsembleStats stats = ensemble_stats(first.axes, all);
  write_results(MPI_COMM_SELF, output, overwrite, first.axes, meta, total, all, &stats);
}

}  // namespace toral
