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
  // The exact entanglement curves' summaries ([entanglement], docs/entanglement.md):
  // per region, and per local dimension N for the stabilizer ones ([N][region],
  // as in the records).
  const EntanglementAxes& ea = axes.entanglement;
  if (ea.present) {
    const std::uint64_t nr = ea.regions(), nm = ea.local_dims.size();
    struct Curve {
      const char* name;
      bool stabilizer;  // inner shape (nM, nR) and needs stabilizer curves; else (nR,)
      bool gaussian;    // needs Gaussian curves
      std::vector<double> PointRecord::*field;
      const char* units;
      const char* meaning;
    };
    const Curve curves[] = {
        {"entanglement_lyapunov_rate", false, false, &PointRecord::ent_lyapunov_rate, "nats/period",
         "Lambda_|A| of each entanglement region: the asymptotic rate of a generic region"},
        {"entanglement_region_rate", false, false, &PointRecord::ent_region_rate, "nats/period",
         "the growth rate each entanglement region reaches: late rate of ln vol(P_A S^t)"},
        {"gaussian_slope", false, true, &PointRecord::gauss_slope, "nats/period",
         "late-time slope of the certified Gaussian S_A(t)"},
        {"gaussian_slope_over_lyapunov", false, true, &PointRecord::gauss_slope_over_lyapunov, "1",
         "Gaussian slope / Lambda_|A|"},
        {"gaussian_slope_over_region_rate", false, true, &PointRecord::gauss_slope_over_region_rate, "1",
         "Gaussian slope / region rate"},
        {"stabilizer_slope", true, false, &PointRecord::stab_slope, "nats/period",
         "late-time slope of the stabilizer S_A(t)"},
        {"stabilizer_slope_over_lyapunov", true, false, &PointRecord::stab_slope_over_lyapunov, "1",
         "stabilizer slope / Lambda_|A|"},
        {"stabilizer_slope_over_lightcone", true, false, &PointRecord::stab_slope_over_lightcone, "1",
         "stabilizer slope / light-cone rate"},
        {"stabilizer_saturation_value", true, false, &PointRecord::stab_saturation_value, "nats",
         "max over t of the stabilizer S_A(t)"},
        {"stabilizer_saturation_time", true, false, &PointRecord::stab_saturation_time, "periods",
         "first t with S_A(t) >= 0.99 of its maximum"},
    };
    for (const Curve& cv : curves) {
      if ((cv.gaussian && !ea.gaussian) || (cv.stabilizer && nm == 0)) continue;
      const auto field = cv.field;
      specs.push_back({cv.name, cv.stabilizer ? std::vector<std::uint64_t>{nm, nr} : std::vector<std::uint64_t>{nr},
                       [field](const PointRecord& r) {
                         const std::vector<double>& v = r.*field;
                         return std::pair<const double*, std::size_t>(v.data(), v.size());
                       },
                       cv.units, cv.meaning});
    }
  }
  for (const auto& s : specs) {
    StatsColumn c;
    c.name = s.name;
    c.inner = s.inner;
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
