#include "assemble.hpp"
#include "errors.hpp"

#include "brickwall_detail.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <limits>
#include <string>
#include <vector>

namespace toral {

const char* operator_name(Operator op) {
  switch (op) {
    case Operator::S: return "S";
    case Operator::M: return "M";
    case Operator::MInverse: return "M^-1";
    case Operator::MInverseT: return "M^-T";
  }
  return "?";
}

std::int64_t DistMatrix::coordinate(PetscInt row) const {
  if (op != Operator::S || layout == Layout::Global) return row;
  return (row & 1) * L + row / 2;
}

PetscInt DistMatrix::index(std::int64_t c) const {
  if (op != Operator::S || layout == Layout::Global) return static_cast<PetscInt>(c);
  return static_cast<PetscInt>(c < L ? 2 * c : 2 * (c - L) + 1);
}

void check_index_limit(std::int64_t n, const char* what) {
  const std::int64_t lim = static_cast<std::int64_t>(PETSC_MAX_INT);
  if (n > lim)
    throw SolverError(std::string("toral: ") + what + " has global dimension " +
                             std::to_string(n) + ", which exceeds the " +
                             std::to_string(8 * sizeof(PetscInt)) + "-bit PetscInt limit " +
                             std::to_string(lim) +
                             " of this PETSc build (position-class M needs L <= " +
                             std::to_string(lim) + ", S needs 2L <= " + std::to_string(lim) +
                             "); a PETSc configured --with-64-bit-indices is needed");
}

namespace {

constexpr std::int64_t kMaxExactDouble = std::int64_t{1} << 53;

bool is_site_ordered(Operator op) { return op != Operator::S; }

// A sparse row under construction: at most 16 (column, value) pairs, merged
// by column with checked arithmetic. (A row of S has at most 8 distinct
// columns; intermediate rows fewer.)
struct SmallRow {
  std::array<std::int64_t, 16> col{};
  std::array<std::int64_t, 16> val{};
  int n = 0;
  void add(std::int64_t c, std::int64_t v) {
    for (int k = 0; k < n; ++k)
      if (col[k] == c) {
        val[k] = checked_add(val[k], v, "one-period matrix entry");
        return;
      }
    if (n == 16) throw std::logic_error("toral assemble: row has more than 16 entries");
    col[n] = c;
    val[n] = v;
    ++n;
  }
};

using detail::bond_of;

// The gates one rank needs, transformed for the operator and validated once.
// Stored in windows of unwrapped indices (a periodic window may start below
// 0 or end above L; index u stands for u mod L).
template <class T>
struct Window {
  std::int64_t lo = 0;
  std::vector<T> data;
};

template <class T>
class Windows {
 public:
  void add(std::int64_t lo, std::int64_t hi) {  // [lo, hi) unwrapped
    Window<T> w;
    w.lo = lo;
    w.data.resize(static_cast<std::size_t>(std::max<std::int64_t>(hi - lo, 0)));
    ws_.push_back(std::move(w));
  }
  std::vector<Window<T>>& all() { return ws_; }
  const T& at(std::int64_t b, std::int64_t L) const {
    for (const auto& w : ws_) {
      const std::int64_t n = static_cast<std::int64_t>(w.data.size());
      for (std::int64_t u : {b, b - L, b + L})
        if (u >= w.lo && u < w.lo + n) return w.data[static_cast<std::size_t>(u - w.lo)];
    }
    throw std::logic_error("toral assemble: gate " + std::to_string(b) + " not cached");
  }

 private:
  std::vector<Window<T>> ws_;
};

struct Assembler {
  const GateSource& g;
  std::int64_t t;
  Operator op;
  Layout layout;
  std::int64_t L, nb;
  bool periodic;
  bool site_layer;
  Windows<Mat2> bond2;  // M-type: the (transformed) 2x2 gate per bond
  Windows<Mat4> bond4;  // S: the 4x4 gate per bond
  Windows<Mat2> site2;  // S with a site layer: the one-site gates

  Assembler(const GateSource& gs, std::int64_t tt, Operator o, Layout lay)
      : g(gs), t(tt), op(o), layout(lay), L(gs.L), nb(gs.bond_count()),
        periodic(gs.boundary == Boundary::Periodic), site_layer(gs.has_site_layer) {}

  // Caches the gates touching sites in the given intervals [a, b).
  void cache(const std::vector<std::pair<std::int64_t, std::int64_t>>& sites) {
    for (const auto& [a, b] : sites) {
      if (b <= a) continue;
      // Rows of sites [a, b) reach bonds a-2 .. b (see the header); keep a margin.
      std::int64_t lo = a - 3, hi = b + 3;
      if (periodic) {
        if (hi - lo >= L) lo = 0, hi = L;
      } else {
        lo = std::max<std::int64_t>(lo, 0);
        hi = std::min<std::int64_t>(hi, nb);
      }
      if (is_site_ordered(op)) {
        bond2.add(lo, hi);
        auto& w = bond2.all().back();
        for (std::int64_t u = lo; u < hi; ++u) w.data[static_cast<std::size_t>(u - lo)] = gate2(wrap(u));
      } else {
        bond4.add(lo, hi);
        auto& w = bond4.all().back();
        for (std::int64_t u = lo; u < hi; ++u) w.data[static_cast<std::size_t>(u - lo)] = gate4(wrap(u));
        if (site_layer) {
          site2.add(a, b);
          auto& s = site2.all().back();
          for (std::int64_t i = a; i < b; ++i) {
            s.data[static_cast<std::size_t>(i - a)] = detail::site_gate(g, i, t);
          }
        }
      }
    }
  }

  std::int64_t wrap(std::int64_t u) const { return periodic ? ((u % L) + L) % L : u; }

  Mat2 gate2(std::int64_t b) const { return detail::gate2(g, b, t, op); }
  Mat4 gate4(std::int64_t b) const { return detail::gate4(g, b, t); }

  // out += v * (row `i` of the M-type bond layer of parity p)
  void add_row2(int p, std::int64_t i, std::int64_t v, SmallRow& out) const {
    std::int64_t b;
    int li;
    if (!bond_of(L, periodic, nb, i, p, b, li)) {
      out.add(i, v);
      return;
    }
    const Mat2& X = bond2.at(b, L);
    const std::int64_t s[2] = {b, (b + 1) % L};
    for (int j = 0; j < 2; ++j)
      if (X(li, j) != 0) out.add(s[j], checked_mul(v, X(li, j), "one-period matrix entry"));
  }

  // out += v * (row of toral coordinate c of the 4x4 bond layer of parity p)
  void add_row4(int p, std::int64_t c, std::int64_t v, SmallRow& out) const {
    const int comp = c >= L ? 1 : 0;
    const std::int64_t i = c - comp * L;
    std::int64_t b;
    int li;
    if (!bond_of(L, periodic, nb, i, p, b, li)) {
      out.add(c, v);
      return;
    }
    const Mat4& G = bond4.at(b, L);
    const std::int64_t s[2] = {b, (b + 1) % L};
    const int loc = 2 * li + comp;
    for (int j = 0; j < 4; ++j)
      if (G(loc, j) != 0)
        out.add((j & 1 ? L : 0) + s[j >> 1], checked_mul(v, G(loc, j), "one-period matrix entry"));
  }

  // Row of toral coordinate c of the operator.
  void row(std::int64_t c, SmallRow& out) const {
    SmallRow a, b;
    switch (op) {
      case Operator::M:  // M = M_odd M_even
      case Operator::MInverseT:  // M^-T = M_odd^-T M_even^-T
        add_row2(1, c, 1, a);
        for (int k = 0; k < a.n; ++k) add_row2(0, a.col[k], a.val[k], out);
        break;
      case Operator::MInverse:  // M^-1 = M_even^-1 M_odd^-1
        add_row2(0, c, 1, a);
        for (int k = 0; k < a.n; ++k) add_row2(1, a.col[k], a.val[k], out);
        break;
      case Operator::S: {  // S = S_site S_odd S_even
        if (site_layer) {
          const int comp = c >= L ? 1 : 0;
          const std::int64_t i = c - comp * L;
          const Mat2& s = site2.at(i, L);
          if (s(comp, 0) != 0) a.add(i, s(comp, 0));
          if (s(comp, 1) != 0) a.add(L + i, s(comp, 1));
        } else {
          a.add(c, 1);
        }
        for (int k = 0; k < a.n; ++k) add_row4(1, a.col[k], a.val[k], b);
        for (int k = 0; k < b.n; ++k) add_row4(0, b.col[k], b.val[k], out);
        break;
      }
    }
  }
};

void check_source(const GateSource& g, Operator op) {
  if (g.L < 2) throw ModelError("lattice: L = " + std::to_string(g.L) + ", needs at least 2 sites");
  if (g.boundary == Boundary::Periodic && g.L % 2 != 0)
    throw ModelError("lattice: L = " + std::to_string(g.L) +
                     " is odd; a periodic brick-wall needs even L");
  if (!g.bond) throw ModelError("gate source: no bond gate function");
  if (g.has_site_layer && !g.site) throw ModelError("gate source: site layer without a site gate function");
  if (is_site_ordered(op) && g.has_site_layer)
    throw ModelError(std::string("circuit has a one-site layer: not position-class, no ") +
                     operator_name(op) + " block (use Operator::S)");
}

}  // namespace

DistMatrix assemble_distributed(MPI_Comm comm, const GateSource& g, std::int64_t t, Operator op,
                                Layout layout) {
  // Everything that can fail before the collective matrix creation is
  // agreed on by all ranks first.
  DistMatrix d;
  d.op = op;
  d.layout = is_site_ordered(op) ? Layout::Global : layout;
  d.L = g.L;
  std::vector<PetscInt> rowptr{0}, cols;
  std::vector<PetscScalar> vals;
  PetscInt m = 0;
  collective_phase(comm, [&] {
    check_source(g, op);
    const std::int64_t N = is_site_ordered(op) ? g.L : 2 * g.L;
    check_index_limit(N, operator_name(op));
    d.n = static_cast<PetscInt>(N);
    // Ownership: PetscSplitOwnership over sites (site-ordered and
    // Interleaved S) or over the 2L rows (Global S).
    const bool by_site = is_site_ordered(op) || d.layout == Layout::Interleaved;
    PetscInt units = by_site ? static_cast<PetscInt>(g.L) : d.n, mine = PETSC_DECIDE;
    TORAL_PCALL(PetscSplitOwnership(comm, &mine, &units));
    PetscInt start = 0;
    MPI_Exscan(&mine, &start, 1, MPIU_INT, MPI_SUM, comm);
    int rank = 0;
    MPI_Comm_rank(comm, &rank);
    if (rank == 0) start = 0;
    const PetscInt per = (by_site && !is_site_ordered(op)) ? 2 : 1;
    d.row_begin = start * per;
    d.row_end = (start + mine) * per;
    m = d.row_end - d.row_begin;

    Assembler as(g, t, op, d.layout);
    std::vector<std::pair<std::int64_t, std::int64_t>> sites;
    if (by_site) {
      sites.emplace_back(start, start + mine);
    } else {  // Global S: q rows of sites [r0, min(r1, L)), p rows of [max(r0, L) - L, r1 - L)
      const std::int64_t r0 = d.row_begin, r1 = d.row_end;
      if (r0 < g.L) sites.emplace_back(r0, std::min<std::int64_t>(r1, g.L));
      if (r1 > g.L) sites.emplace_back(std::max<std::int64_t>(r0, g.L) - g.L, r1 - g.L);
    }
    as.cache(sites);

    rowptr.reserve(static_cast<std::size_t>(m) + 1);
    const std::size_t per_row = is_site_ordered(op) ? 4 : 8;
    cols.reserve(static_cast<std::size_t>(m) * per_row);
    vals.reserve(static_cast<std::size_t>(m) * per_row);
    std::array<std::pair<PetscInt, std::int64_t>, 17> buf;
    SmallRow r;
    for (PetscInt row = d.row_begin; row < d.row_end; ++row) {
      r.n = 0;
      as.row(d.coordinate(row), r);
      // Non-zeros, plus the diagonal even when it is zero: shifted copies
      // (A - sigma I in shift-and-invert) then never need a new non-zero.
      int k = 0;
      bool diag = false;
      for (int e = 0; e < r.n; ++e) {
        const bool on_diag = d.index(r.col[e]) == row;
        if (r.val[e] != 0 || on_diag) buf[static_cast<std::size_t>(k++)] = {d.index(r.col[e]), r.val[e]};
        diag = diag || on_diag;
      }
      if (!diag) buf[static_cast<std::size_t>(k++)] = {row, 0};
      std::sort(buf.begin(), buf.begin() + k);
      if (static_cast<std::int64_t>(cols.size()) + k > static_cast<std::int64_t>(PETSC_MAX_INT))
        throw SolverError("toral: more than " + std::to_string(PETSC_MAX_INT) +
                                 " non-zeros on one rank exceed the 32-bit PetscInt; use more ranks");
      for (int e = 0; e < k; ++e) {
        const std::int64_t v = buf[static_cast<std::size_t>(e)].second;
        if (v > kMaxExactDouble || v < -kMaxExactDouble)
          throw SolverError("toral: entry " + std::to_string(v) + " of " + operator_name(op) +
                                   " (coordinate " + std::to_string(d.coordinate(row)) +
                                   ", period " + std::to_string(t) +
                                   ") exceeds 2^53 and is not exact in double precision");
        cols.push_back(buf[static_cast<std::size_t>(e)].first);
        vals.push_back(static_cast<PetscScalar>(v));
      }
      rowptr.push_back(static_cast<PetscInt>(cols.size()));
    }
  });
  collective_phase(comm, [&] {
    TORAL_PCALL(MatCreate(comm, d.A.out()));
    TORAL_PCALL(MatSetSizes(d.mat(), m, m, d.n, d.n));
    TORAL_PCALL(MatSetType(d.mat(), MATAIJ));
    // Exact preallocation and the values in one step (also assembles);
    // only the call matching the actual type (Seq/MPI) acts.
    TORAL_PCALL(MatSeqAIJSetPreallocationCSR(d.mat(), rowptr.data(), cols.data(), vals.data()));
    TORAL_PCALL(MatMPIAIJSetPreallocationCSR(d.mat(), rowptr.data(), cols.data(), vals.data()));
    TORAL_PCALL(MatSetOption(d.mat(), MAT_NEW_NONZERO_ALLOCATION_ERR, PETSC_TRUE));
  });
  return d;
}

SparseInt gather_to_root(const DistMatrix& d, int root) {
  MPI_Comm comm = PetscObjectComm(reinterpret_cast<PetscObject>(d.mat()));
  int rank = 0, size = 1;
  MPI_Comm_rank(comm, &rank);
  MPI_Comm_size(comm, &size);
  std::vector<std::int64_t> rc;  // (row, col) pairs in toral coordinates
  std::vector<double> v;
  collective_phase(comm, [&] {
    for (PetscInt r = d.row_begin; r < d.row_end; ++r) {
      PetscInt nc = 0;
      const PetscInt* c = nullptr;
      const PetscScalar* x = nullptr;
      TORAL_PCALL(MatGetRow(d.mat(), r, &nc, &c, &x));
      for (PetscInt k = 0; k < nc; ++k) {
        if (x[k] == 0.0) continue;
        if (x[k] != std::nearbyint(x[k]) || std::fabs(x[k]) > static_cast<double>(kMaxExactDouble))
          throw SolverError("gather_to_root: entry is not an exact integer");
        rc.push_back(d.coordinate(r));
        rc.push_back(d.coordinate(c[k]));
        v.push_back(x[k]);
      }
      TORAL_PCALL(MatRestoreRow(d.mat(), r, &nc, &c, &x));
    }
    if (v.size() > static_cast<std::size_t>(std::numeric_limits<int>::max() / 2))
      throw SolverError("gather_to_root: matrix too large to gather");
  });
  int cnt = static_cast<int>(v.size());
  std::vector<int> counts(static_cast<std::size_t>(size)), displ(static_cast<std::size_t>(size));
  MPI_Gather(&cnt, 1, MPI_INT, counts.data(), 1, MPI_INT, root, comm);
  std::vector<int> counts2(counts), displ2(displ);
  long total = 0;
  if (rank == root)
    for (int p = 0; p < size; ++p) {
      displ[static_cast<std::size_t>(p)] = static_cast<int>(total);
      total += counts[static_cast<std::size_t>(p)];
      counts2[static_cast<std::size_t>(p)] = 2 * counts[static_cast<std::size_t>(p)];
      displ2[static_cast<std::size_t>(p)] = 2 * displ[static_cast<std::size_t>(p)];
    }
  std::vector<std::int64_t> all_rc(rank == root ? static_cast<std::size_t>(2 * total) : 0);
  std::vector<double> all_v(rank == root ? static_cast<std::size_t>(total) : 0);
  MPI_Gatherv(rc.data(), 2 * cnt, MPI_INT64_T, all_rc.data(), counts2.data(), displ2.data(),
              MPI_INT64_T, root, comm);
  MPI_Gatherv(v.data(), cnt, MPI_DOUBLE, all_v.data(), counts.data(), displ.data(), MPI_DOUBLE,
              root, comm);
  SparseInt s;
  if (rank != root) return s;
  std::vector<std::size_t> order(static_cast<std::size_t>(total));
  for (std::size_t k = 0; k < order.size(); ++k) order[k] = k;
  std::sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) {
    return std::pair(all_rc[2 * a], all_rc[2 * a + 1]) < std::pair(all_rc[2 * b], all_rc[2 * b + 1]);
  });
  s.n = d.n;
  s.rowptr.assign(static_cast<std::size_t>(s.n) + 1, 0);
  for (std::size_t k : order) {
    ++s.rowptr[static_cast<std::size_t>(all_rc[2 * k]) + 1];
    s.col.push_back(all_rc[2 * k + 1]);
    s.val.push_back(static_cast<std::int64_t>(all_v[k]));
  }
  for (std::size_t i = 0; i < static_cast<std::size_t>(s.n); ++i) s.rowptr[i + 1] += s.rowptr[i];
  return s;
}

}  // namespace toral
