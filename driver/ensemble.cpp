#include "ensemble.hpp"

#include <algorithm>
#include <functional>
#include <map>

#include "stats.hpp"
#include "sweep.hpp"

namespace toral {

EnsembleStats ensemble_stats(const RunAxes& axes, const std::vector<PointRecord>& records) {
  EnsembleStats st;
  const auto seed_it = std::find(axes.param_names.begin(), axes.param_names.end(), "seed");
  if (seed_it == axes.param_names.end()) return st;
  const std::size_t seed_col = static_cast<std::size_t>(seed_it - axes.param_names.begin());
  for (std::size_t i = 0; i < axes.param_names.size(); ++i)
    if (i != seed_col) st.param_names.push_back(axes.param_names[i]);

  // group key: all parameters but the seed; only points that have a seed
  std::map<std::vector<std::int64_t>, std::vector<const PointRecord*>> groups;
  std::map<std::vector<std::int64_t>, std::int64_t> members;
  for (const auto& r : records) {
    if (r.params.size() != axes.param_names.size() || r.params[seed_col] == kAbsent) continue;
    std::vector<std::int64_t> key;
    for (std::size_t i = 0; i < r.params.size(); ++i)
      if (i != seed_col) key.push_back(r.params[i]);
    auto& g = groups[key];
    if (r.status == static_cast<std::int32_t>(PointStatus::Ok)) g.push_back(&r);
  }
  if (groups.empty()) return st;

  const std::uint64_t nl = axes.region_sizes.size(), nn = axes.local_dims.size();
  struct Spec {
    const char* name;
    std::vector<std::uint64_t> inner;
    std::function<std::pair<const double*, std::size_t>(const PointRecord&)> data;
    const char* units;
    const char* meaning;
  };
  std::vector<Spec> specs = {
      {"lambda_max", {}, [](const PointRecord& r) { return std::pair<const double*, std::size_t>(&r.lambda_max, 1); }, "1/period", "largest Lyapunov exponent"},
      {"ks_density", {}, [](const PointRecord& r) { return std::pair<const double*, std::size_t>(&r.ks_density, 1); }, "nats/(period*site)", "KS rate per site"},
      {"ks_rate", {}, [](const PointRecord& r) { return std::pair<const double*, std::size_t>(&r.ks_rate, 1); }, "nats/period", "KS rate h"},
      {"lyapunov_rate", {nl}, [](const PointRecord& r) { return std::pair<const double*, std::size_t>(r.lyapunov_rate.data(), r.lyapunov_rate.size()); }, "nats/period",
       "Lambda_ell, the asymptotic entropy growth rate of a generic ell-site region (not a bound)"},
      {"hilbert_cap", {nl, nn}, [](const PointRecord& r) { return std::pair<const double*, std::size_t>(r.hilbert_cap.data(), r.hilbert_cap.size()); }, "nats",
       "Hilbert-space cap"},
      {"lightcone_rate", {nl, nn}, [](const PointRecord& r) { return std::pair<const double*, std::size_t>(r.lightcone_rate.data(), r.lightcone_rate.size()); }, "nats/period",
       "light-cone rate 2 c ln N of the ell-site block"},
      {"ehrenfest_time", {nn}, [](const PointRecord& r) { return std::pair<const double*, std::size_t>(r.ehrenfest_time.data(), r.ehrenfest_time.size()); }, "periods",
       "Ehrenfest time ln N / lambda_max"},
      {"saturation_lyapunov", {nl, nn}, [](const PointRecord& r) { return std::pair<const double*, std::size_t>(r.saturation_lyapunov.data(), r.saturation_lyapunov.size()); }, "periods",
       "cap / Lambda_ell: a generic region's time to the cap at its asymptotic rate (not a bound)"},
      {"saturation_lightcone", {nl, nn}, [](const PointRecord& r) { return std::pair<const double*, std::size_t>(r.saturation_lightcone.data(), r.saturation_lightcone.size()); },
       "periods", "cap / light-cone rate: earliest possible saturation (theorem)"},
  };
  // The diagnostics' fields that declare a /stats column (io/schema.hpp).
  const Schema& sc = axes.schema;
  std::vector<std::vector<std::string>> dims(specs.size());
  const std::string R = "/bounds/region_size", N = "/bounds/local_dim";
  for (std::size_t k = 0; k < specs.size(); ++k) {
    const auto& in = specs[k].inner;
    if (in.size() == 2) dims[k] = {R, N};
    else if (in.size() == 1) dims[k] = {std::string(specs[k].name) == "ehrenfest_time" ? N : R};
  }
  for (std::size_t f = 0; f < sc.fields.size(); ++f) {
    const FieldDecl& fd = sc.fields[f];
    if (fd.stats.empty()) continue;
    std::vector<std::uint64_t> inner;
    for (auto x : sc.inner_shape(f)) inner.push_back(static_cast<std::uint64_t>(x));
    specs.push_back({fd.stats.c_str(), inner,
                     [f](const PointRecord& r) {
                       if (f >= r.fields.size()) return std::pair<const double*, std::size_t>(nullptr, 0);
                       return std::pair<const double*, std::size_t>(r.fields[f].f.data(), r.fields[f].f.size());
                     },
                     fd.units.c_str(), fd.meaning.c_str()});
    dims.push_back(fd.dims);
  }
  for (std::size_t k = 0; k < specs.size(); ++k) {
    const Spec& s = specs[k];
    StatsColumn c;
    c.name = s.name;
    c.inner = s.inner;
    c.inner_dims = dims[k];
    c.units = s.units;
    c.meaning = s.meaning;
    st.columns.push_back(std::move(c));
  }
  for (auto& [key, recs] : groups) {
    // A fixed order (by point index) makes the sums independent of the
    // order in which ranks finished the points.
    std::sort(recs.begin(), recs.end(), [](const PointRecord* a, const PointRecord* b) { return a->index < b->index; });
    st.params.insert(st.params.end(), key.begin(), key.end());
    st.count.push_back(static_cast<std::int64_t>(recs.size()));
    for (std::size_t k = 0; k < specs.size(); ++k) {
      std::size_t width = 1;
      for (auto d : specs[k].inner) width *= d;
      for (std::size_t e = 0; e < width; ++e) {
        std::vector<double> v;
        v.reserve(recs.size());
        for (const PointRecord* r : recs) {
          const auto [ptr, have] = specs[k].data(*r);
          v.push_back(have == width ? ptr[e] : kNaN);  // a short vector: no value
        }
        const SampleStats ss = sample_stats(std::move(v));
        auto& c = st.columns[k];
        c.mean.push_back(ss.mean);
        c.std.push_back(ss.std);
        c.sem.push_back(ss.sem);
        c.median.push_back(ss.median);
      }
    }
  }
  return st;
}

}  // namespace toral
