#include "tangent.hpp"
#include "errors.hpp"

#include <Random123/philox.h>
#include <slepcbv.h>

#include <algorithm>
#include <cmath>
#include <exception>
#include <limits>
#include <memory>
#include <string>
#include <vector>

#include "assemble.hpp"
#include "layers.hpp"
#include "petsc_util.hpp"

namespace toral {
namespace {

// Entry of initial column j at toral coordinate c.
double initial_entry(std::uint64_t seed, std::uint64_t j, std::uint64_t c) {
  using G = r123::Philox4x64;
  G gen;
  const G::key_type key = {{seed, 0x746f72616c2d7467ULL}};  // "toral-tg"
  const G::ctr_type ctr = {{c, j, 0, 0}};
  const G::ctr_type r = gen(ctr, key);
  const double u = static_cast<double>(r[0] >> 11) * 0x1.0p-53;
  return 2.0 * u - 1.0;
}

// One cocycle (one operator) with its k tangent vectors.
struct Cocycle {
  Operator op;
  bool matrix_free = false;
  DistMatrix A;     // layer operator (matrix-free) or the assembled period matrix
  UniqueBV V, W;
  int k = 0;
  std::vector<double> total;    // sum over measured periods of ln|R_jj|
  std::vector<double> window;   // current window's sum
  std::vector<std::vector<double>> means;  // window means, per window
};

void make_operator(Cocycle& c, MPI_Comm comm, const GateSource& g, std::int64_t t) {
  if (c.matrix_free)
    layer_operator_set_period(c.A, g, t);
  else
    c.A = assemble_distributed(comm, g, t, c.op, Layout::Interleaved);
}

}  // namespace

TangentResult tangent_top(MPI_Comm comm, const GateSource& g, const TangentOptions& o) {
  const double t_start = MPI_Wtime();
  TangentResult res;
  try {
    if (!slepc_ready()) throw SolverError("tangent_top: SlepcInitialize has not been called");
    if (o.k < 1) throw InvalidInput("tangent_top: k must be >= 1");
    if (o.periods < 2 || o.windows < 2 || o.periods < o.windows || o.transient < 0)
      throw InvalidInput("tangent_top: needs periods >= windows >= 2 and transient >= 0");
    int size = 1;
    MPI_Comm_size(comm, &size);
    const bool pos = g.position_class && !g.has_site_layer;
    std::vector<Operator> ops = pos ? std::vector<Operator>{Operator::M, Operator::MInverseT}
                                    : std::vector<Operator>{Operator::S};
    const std::int64_t wlen = o.periods / o.windows;
    const int nwin = o.windows;
    const std::int64_t T = wlen * nwin;
    std::vector<std::unique_ptr<Cocycle>> cs;
    for (Operator op : ops) {
      auto c = std::make_unique<Cocycle>();
      c->op = op;
      const std::int64_t n = op == Operator::S ? 2 * g.L : g.L;
      c->k = static_cast<int>(std::min<std::int64_t>(o.k, n));
      c->matrix_free = g.L >= 2 * size;
      if (c->matrix_free)
        c->A = make_layer_operator(comm, g, o.t0, op);
      else
        c->A = assemble_distributed(comm, g, o.t0, op, Layout::Interleaved);
      UniqueVec tmpl;
      TORAL_PCALL(MatCreateVecs(c->A.mat(), tmpl.out(), nullptr));
      for (UniqueBV* bv : {&c->V, &c->W}) {
        TORAL_PCALL(BVCreate(comm, bv->out()));
        TORAL_PCALL(BVSetSizesFromVec(bv->get(), tmpl.get(), c->k));
        TORAL_PCALL(BVSetType(bv->get(), BVSVEC));
        TORAL_PCALL(BVSetOrthogonalization(bv->get(), BV_ORTHOG_CGS, BV_ORTHOG_REFINE_IFNEEDED,
                                           PETSC_DEFAULT, BV_ORTHOG_BLOCK_GS));
        if (!o.options_prefix.empty()) TORAL_PCALL(BVSetOptionsPrefix(bv->get(), o.options_prefix.c_str()));
        TORAL_PCALL(BVSetFromOptions(bv->get()));
      }
      // Seeded, rank-count independent initial vectors.
      for (int j = 0; j < c->k; ++j) {
        Vec v;
        TORAL_PCALL(BVGetColumn(c->V.get(), j, &v));
        PetscScalar* a;
        TORAL_PCALL(VecGetArray(v, &a));
        for (PetscInt r = c->A.row_begin; r < c->A.row_end; ++r)
          a[r - c->A.row_begin] = initial_entry(o.seed + (op == Operator::MInverseT ? 0x9e3779b97f4a7c15ULL : 0),
                                                static_cast<std::uint64_t>(j),
                                                static_cast<std::uint64_t>(c->A.coordinate(r)));
        TORAL_PCALL(VecRestoreArray(v, &a));
        TORAL_PCALL(BVRestoreColumn(c->V.get(), j, &v));
      }
      TORAL_PCALL(BVOrthogonalize(c->V.get(), nullptr));
      c->total.assign(static_cast<std::size_t>(c->k), 0.0);
      c->window.assign(static_cast<std::size_t>(c->k), 0.0);
      cs.push_back(std::move(c));
    }
    const int kmax = std::max_element(cs.begin(), cs.end(), [](const auto& a, const auto& b) { return a->k < b->k; })->get()->k;
    UniqueMat R;
    TORAL_PCALL(MatCreateSeqDense(PETSC_COMM_SELF, kmax, kmax, nullptr, R.out()));
    const std::int64_t steps = o.transient + T;
    for (std::int64_t s = 0; s < steps; ++s) {
      const std::int64_t t = o.t0 + s;
      for (auto& cp : cs) {
        Cocycle& c = *cp;
        if (!g.time_periodic && s > 0) make_operator(c, comm, g, t);
        TORAL_PCALL(BVMatMult(c.V.get(), c.A.mat(), c.W.get()));
        UniqueMat Rk;
        Mat Rm = R.get();
        if (c.k != kmax) {
          TORAL_PCALL(MatCreateSeqDense(PETSC_COMM_SELF, c.k, c.k, nullptr, Rk.out()));
          Rm = Rk.get();
        }
        TORAL_PCALL(BVOrthogonalize(c.W.get(), Rm));
        std::swap(c.V, c.W);
        if (s < o.transient) continue;
        const PetscScalar* r;
        PetscInt lda;
        TORAL_PCALL(MatDenseGetLDA(Rm, &lda));
        TORAL_PCALL(MatDenseGetArrayRead(Rm, &r));
        for (int j = 0; j < c.k; ++j) c.window[static_cast<std::size_t>(j)] += std::log(std::fabs(r[j * lda + j]));
        TORAL_PCALL(MatDenseRestoreArrayRead(Rm, &r));
        const std::int64_t done = s - o.transient + 1;
        if (done % wlen == 0) {
          std::vector<double> mean(static_cast<std::size_t>(c.k));
          for (int j = 0; j < c.k; ++j) {
            mean[static_cast<std::size_t>(j)] = c.window[static_cast<std::size_t>(j)] / static_cast<double>(wlen);
            c.total[static_cast<std::size_t>(j)] += c.window[static_cast<std::size_t>(j)];
            c.window[static_cast<std::size_t>(j)] = 0.0;
          }
          c.means.push_back(std::move(mean));
        }
      }
    }
    struct Item {
      double lam, err2, se, drift;  // err2: err_j^2 without the neighbour term
      double err = 0.0;
      std::string src;
      std::size_t cocycle = 0;  // index into cs
      int column = 0;           // column of the cocycle's frame
    };
    std::vector<Item> items;
    constexpr double kEps = std::numeric_limits<double>::epsilon();
    // The halves: the first and the last `half` windows (the middle one is
    // left out when W is odd).
    const int half = nwin / 2;
    // Bias per unit of D if the window means approach lambda like a / t, t
    // counted from the initial vectors (a Jordan block; header comment):
    // bias = a ln((tau + T) / tau) / T, D = a (ln((tau + h) / tau)
    // - ln((tau + T) / (tau + T - h))) / h, h = the halves' length. Only for
    // time-periodic circuits (a redrawn cocycle has no Jordan blocks).
    double jordan = 1.0;
    if (g.time_periodic && o.transient > 0) {
      const double tau = static_cast<double>(o.transient), Tm = static_cast<double>(T),
                   h = static_cast<double>(half * wlen);
      const double d = (std::log1p(h / tau) + std::log1p(-h / (tau + Tm))) / h;
      if (d > 0) jordan = std::max(1.0, std::log1p(Tm / tau) / Tm / d);
    }
    for (std::size_t ci = 0; ci < cs.size(); ++ci) {
      Cocycle& c = *cs[ci];
      for (int j = 0; j < c.k; ++j) {
        const std::size_t jj = static_cast<std::size_t>(j);
        const double lam = c.total[jj] / static_cast<double>(T);
        double ss = 0.0;
        for (const auto& mw : c.means) {
          const double d = mw[jj] - lam;
          ss += d * d;
        }
        const double se = std::sqrt(ss / (static_cast<double>(nwin) * (nwin - 1)));
        double first = 0.0, second = 0.0;
        for (int w = 0; w < half; ++w) first += c.means[static_cast<std::size_t>(w)][jj];
        for (int w = nwin - half; w < nwin; ++w) second += c.means[static_cast<std::size_t>(w)][jj];
        const double drift = std::fabs(second - first) / half;
        const double bias = jordan * drift;
        const double rounding = 256.0 * kEps * std::max(1.0, std::fabs(lam));
        const double err2 = se * se + bias * bias + rounding * rounding;
        if (!std::isfinite(lam) || !std::isfinite(err2))
          throw SolverError("tangent_top: non-finite exponent (a tangent vector collapsed)");
        items.push_back({lam, err2, se, drift, 0.0, operator_name(c.op), ci, j});
      }
    }
    std::stable_sort(items.begin(), items.end(), [](const Item& a, const Item& b) { return a.lam > b.lam; });
    // Unresolved neighbours (header comment): half the spread of the
    // estimates within 2 / (transient + T) of lambda_j. Over all computed
    // exponents of both cocycles (sorted descending), before the top k are kept.
    const double resolution = 2.0 / static_cast<double>(o.transient + T);
    std::size_t hi = 0, lo = 0;  // the highest and lowest estimate within the resolution of item i
    for (std::size_t i = 0; i < items.size(); ++i) {
      while (items[hi].lam - items[i].lam >= resolution) ++hi;
      lo = std::max(lo, i);
      while (lo + 1 < items.size() && items[i].lam - items[lo + 1].lam < resolution) ++lo;
      const double spread = 0.5 * (items[hi].lam - items[lo].lam);
      items[i].err = std::sqrt(items[i].err2 + spread * spread);
    }
    const std::size_t K = std::min<std::size_t>(static_cast<std::size_t>(o.k), items.size());
    for (std::size_t i = 0; i < K; ++i) {
      res.exponents.push_back(items[i].lam);
      res.errors.push_back(items[i].err);
      res.standard_errors.push_back(items[i].se);
      res.drift.push_back(items[i].drift);
      res.source.push_back(items[i].src);
      res.max_error = std::max(res.max_error, items[i].err);
    }
    res.window_means.assign(static_cast<std::size_t>(nwin), std::vector<double>(K));
    for (std::size_t i = 0; i < K; ++i)
      for (int w = 0; w < nwin; ++w)
        res.window_means[static_cast<std::size_t>(w)][i] =
            cs[items[i].cocycle]->means[static_cast<std::size_t>(w)][static_cast<std::size_t>(items[i].column)];
    if (o.keep_vectors) {
      // Collective: every rank sorted the same R diagonals (BVOrthogonalize
      // returns R on every rank), so the loop is the same everywhere.
      int rank = 0;
      MPI_Comm_rank(comm, &rank);
      for (std::size_t i = 0; i < K; ++i) {
        const Cocycle& c = *cs[items[i].cocycle];
        Vec col, all;
        VecScatter sc;
        TORAL_PCALL(BVGetColumn(c.V.get(), items[i].column, &col));
        TORAL_PCALL(VecScatterCreateToZero(col, &sc, &all));
        TORAL_PCALL(VecScatterBegin(sc, col, all, INSERT_VALUES, SCATTER_FORWARD));
        TORAL_PCALL(VecScatterEnd(sc, col, all, INSERT_VALUES, SCATTER_FORWARD));
        if (rank == 0) {
          std::vector<double> v(static_cast<std::size_t>(2 * g.L), 0.0);
          const PetscScalar* a;
          PetscInt n = 0;
          TORAL_PCALL(VecGetSize(all, &n));
          TORAL_PCALL(VecGetArrayRead(all, &a));
          for (PetscInt r = 0; r < n; ++r) {
            std::int64_t x = c.A.coordinate(r);
            if (c.op == Operator::MInverseT) x += g.L;  // the momentum block: p_i = L + i
            v[static_cast<std::size_t>(x)] = a[r];
          }
          TORAL_PCALL(VecRestoreArrayRead(all, &a));
          res.vectors.push_back(std::move(v));
        }
        TORAL_PCALL(VecScatterDestroy(&sc));
        TORAL_PCALL(VecDestroy(&all));
        TORAL_PCALL(BVRestoreColumn(c.V.get(), items[i].column, &col));
      }
    }
    res.periods = T;
    res.windows = nwin;
    res.ok = true;
    if (static_cast<std::int64_t>(K) < o.k)
      res.message = "only " + std::to_string(K) + " exponents exist (2L = " + std::to_string(2 * g.L) + ")";
  } catch (const std::exception& e) {
    res.ok = false;
    res.message = e.what();
  }
  res.wall_seconds = MPI_Wtime() - t_start;
  return res;
}

}  // namespace toral
