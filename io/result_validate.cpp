// Validation of what write_results is given: the records (rank-local and,
// for the uniqueness of the global indices, collective) and the stats.
#include <algorithm>
#include <string>
#include <utility>
#include <vector>

#include "result_internal.hpp"

namespace toral::result_detail {

// Rank-local validation of the records (sorted by row) against the axes.
// `whole`: a whole-run file, where row must equal index.
std::string validate(const std::vector<const PointRecord*>& recs, const RunAxes& ax,
                     std::int64_t rows, std::int64_t total, bool whole) {
  const std::size_t nl = ax.region_sizes.size(), nn = ax.local_dims.size();
  const std::size_t bins = static_cast<std::size_t>(std::max(ax.hist_bins, 0));
  const std::size_t edges = bins > 0 ? bins + 1 : 0;
  for (std::size_t i = 0; i < recs.size(); ++i) {
    const PointRecord& r = *recs[i];
    const std::string at = "point " + std::to_string(r.index);
    auto len = [&](const std::vector<double>& v, std::size_t want, const char* name) -> std::string {
      if (v.empty() || v.size() == want) return {};
      return at + ": " + name + " has " + std::to_string(v.size()) + " values, expected " +
             std::to_string(want) + " (or none)";
    };
    if (r.index < 0 || r.index >= total)
      return at + ": index outside 0.." + std::to_string(total - 1);
    if (r.row < -1)
      return at + ": row " + std::to_string(r.row) + " is negative (-1 means row = index)";
    const std::int64_t row = row_of(r);
    if (row >= rows)
      return at + ": row " + std::to_string(row) + " outside 0.." + std::to_string(rows - 1);
    if (whole && row != r.index)
      return at + ": row " + std::to_string(row) +
             " differs from the index in a whole-run file (shard \"\" and total_points = rows); "
             "set meta.shard for a file holding a subset";
    if (i > 0 && row_of(*recs[i - 1]) == row)
      return at + " (row " + std::to_string(row) + "): passed twice";
    if (r.params.size() != ax.param_names.size())
      return at + ": " + std::to_string(r.params.size()) + " parameters, expected " +
             std::to_string(ax.param_names.size());
    if (!r.exponent_errors.empty() && r.exponent_errors.size() != r.exponents.size())
      return at + ": exponent_errors has " + std::to_string(r.exponent_errors.size()) +
             " values for " + std::to_string(r.exponents.size()) + " exponents (expected as many, "
             "or none)";
    for (const std::string& e :
         {len(r.hist_counts, bins, "hist_counts"), len(r.hist_edges, edges, "hist_edges"),
          len(r.limit_hist_counts, bins, "limit_hist_counts"),
          len(r.limit_hist_edges, edges, "limit_hist_edges"),
          len(r.lyapunov_rate, nl, "lyapunov_rate"), len(r.hilbert_cap, nl * nn, "hilbert_cap"),
          len(r.lightcone_rate, nl * nn, "lightcone_rate"),
          len(r.ehrenfest_time, nn, "ehrenfest_time"),
          len(r.saturation_lyapunov, nl * nn, "saturation_lyapunov"),
          len(r.saturation_lightcone, nl * nn, "saturation_lightcone")})
      if (!e.empty()) return e;
    if (!r.cuts.empty() && r.cuts.size() != nl)
      return at + ": cuts has " + std::to_string(r.cuts.size()) + " values, expected " + std::to_string(nl) +
             " (or none)";
    if (!r.fields.empty() && r.fields.size() != ax.schema.fields.size())
      return at + ": " + std::to_string(r.fields.size()) + " diagnostic values for " +
             std::to_string(ax.schema.fields.size()) + " declared fields (expected as many, or none)";
    for (std::size_t k = 0; k < r.fields.size(); ++k) {
      const std::string e = check_value(ax.schema, k, r.fields[k]);
      if (!e.empty()) return at + ": " + e;
    }
  }
  return {};
}

// Collective: the global indices are unique over all ranks. Each (index,
// row) pair goes to rank index % size, which looks for repeats. Returns
// this rank's finding (empty when none).
std::string duplicate_index(MPI_Comm comm, const std::vector<const PointRecord*>& recs) {
  const int size = comm_size(comm);
  std::vector<int> scount(static_cast<std::size_t>(size), 0), rcount(scount), sdispl(scount),
      rdispl(scount);
  for (const auto* r : recs) scount[static_cast<std::size_t>(r->index % size)] += 2;
  for (int k = 1; k < size; ++k) sdispl[k] = sdispl[k - 1] + scount[k - 1];
  std::vector<std::int64_t> send(recs.size() * 2);
  {
    std::vector<int> at(sdispl);
    for (const auto* r : recs) {
      int& a = at[static_cast<std::size_t>(r->index % size)];
      send[static_cast<std::size_t>(a)] = r->index;
      send[static_cast<std::size_t>(a) + 1] = row_of(*r);
      a += 2;
    }
  }
  MPI_Alltoall(scount.data(), 1, MPI_INT, rcount.data(), 1, MPI_INT, comm);
  for (int k = 1; k < size; ++k) rdispl[k] = rdispl[k - 1] + rcount[k - 1];
  std::vector<std::int64_t> recv(static_cast<std::size_t>(rdispl.back() + rcount.back()));
  MPI_Alltoallv(send.data(), scount.data(), sdispl.data(), MPI_INT64_T, recv.data(), rcount.data(),
                rdispl.data(), MPI_INT64_T, comm);
  std::vector<std::pair<std::int64_t, std::int64_t>> pairs;
  pairs.reserve(recv.size() / 2);
  for (std::size_t i = 0; i + 1 < recv.size(); i += 2) pairs.emplace_back(recv[i], recv[i + 1]);
  std::sort(pairs.begin(), pairs.end());
  for (std::size_t i = 1; i < pairs.size(); ++i)
    if (pairs[i].first == pairs[i - 1].first)
      return "point " + std::to_string(pairs[i].first) + " is in more than one row (rows " +
             std::to_string(pairs[i - 1].second) + " and " + std::to_string(pairs[i].second) + ")";
  return {};
}

// Validation of (rank 0's, broadcast) stats; identical on every rank.
std::string validate_stats(const EnsembleStats& st) {
  const std::size_t G = st.count.size();
  const std::string at = "stats: ";
  if (st.params.size() != G * st.param_names.size())
    return at + std::to_string(st.params.size()) + " parameter values for " + std::to_string(G) +
           " groups x " + std::to_string(st.param_names.size()) + " parameters";
  std::vector<std::string> names = st.param_names;
  names.push_back("count");
  for (const auto& c : st.columns) names.push_back(c.name);
  for (const auto& n : names)
    if (n.empty() || n.find('/') != std::string::npos || n == "." || n == "..")
      return at + "invalid name '" + n + "'";
  {
    std::vector<std::string> sorted = names;
    std::sort(sorted.begin(), sorted.end());
    auto d = std::adjacent_find(sorted.begin(), sorted.end());
    if (d != sorted.end())
      return at + "name '" + *d + "' used twice (parameters, \"count\" and columns share /stats)";
  }
  for (const auto& c : st.columns) {
    if (!c.inner_dims.empty() && c.inner_dims.size() != c.inner.size())
      return at + "column '" + c.name + "' names " + std::to_string(c.inner_dims.size()) + " axes for " +
             std::to_string(c.inner.size()) + " trailing dims";
    std::size_t w = 1;
    for (auto x : c.inner) w *= static_cast<std::size_t>(x);
    const std::size_t want = G * w;
    for (const auto& [v, what] : {std::pair{&c.mean, "mean"}, std::pair{&c.std, "std"},
                                  std::pair{&c.sem, "sem"}, std::pair{&c.median, "median"}})
      if (v->size() != want)
        return at + "column '" + c.name + "' " + what + " has " + std::to_string(v->size()) +
               " values, expected " + std::to_string(want) + " (groups x inner)";
  }
  return {};
}

}  // namespace toral::result_detail
