#include "layers.hpp"
#include "errors.hpp"

#include <algorithm>
#include <array>
#include <string>
#include <vector>

#include "brickwall_detail.hpp"
#include "petsc_util.hpp"

namespace toral {
namespace {

// One bond layer restricted to what this rank needs: bonds by the local
// (unwrapped) position k of their first site, relative to the first owned site.
struct Layer {
  int parity = 0;
  std::vector<std::int64_t> k;   // first-site positions, ascending
  std::vector<std::int64_t> b;   // bond index of each
  std::vector<double> G;         // d x d row-major per bond
  std::vector<float> Gf;         // the same, when every entry is exact in float
  std::vector<std::int8_t> Gi;   // the same, when every entry fits int8
  std::vector<std::int64_t> alone;  // positions no bond of this layer touches
};

// Storage of the gate entries (all exact integers): the smallest exact type.
enum class GateStore { Int8, Float, Double };

struct LayerCtx {
  MPI_Comm comm = MPI_COMM_NULL;
  int left = MPI_PROC_NULL, right = MPI_PROC_NULL;
  int w = 1;  // values per site: 1 (M-type) or 2 (S, interleaved)
  std::int64_t L = 0, s0 = 0, m = 0, nb = 0;
  bool periodic = true;
  Operator op = Operator::M;
  std::array<Layer, 2> layer;  // applied first, second
  bool has_site = false;
  std::vector<double> site;    // 2x2 row-major per owned site (S with a site layer)
  std::vector<double> ghostL, ghostR, u;  // halo values and the middle vector (one chunk)
  std::vector<double> haloL, haloR, t0, t1, tu, ga, gb;  // fused powers: halos, tile buffers, tile gates
  bool regular = false;  // bond positions of each layer advance by 2 (fused powers rely on it)
  GateStore store = GateStore::Double;
};

// Sites per chunk: the middle vector of a chunk stays in cache.
constexpr std::int64_t kChunk = 1024;
// Fused powers A^p (apply_power): p <= kMaxFused, tiles of kTile sites. The
// bond lists reach 2 kMaxFused sites beyond the owned ones for that.
constexpr int kMaxFused = 16;
constexpr std::int64_t kTile = 2048;
constexpr std::int64_t kReach = 2 * kMaxFused + 2;

int dim(const LayerCtx& c) { return 2 * c.w; }

// Builds the bond lists of one layer for positions [klo, khi] of first sites.
void build_layer(LayerCtx& c, Layer& ly, int parity, std::int64_t klo, std::int64_t khi,
                 std::int64_t cover_lo, std::int64_t cover_hi) {
  ly = Layer{};
  ly.parity = parity;
  for (std::int64_t k = klo; k <= khi; ++k) {
    const std::int64_t a = c.s0 + k;  // unwrapped site
    if (!c.periodic && (a < 0 || a >= c.nb)) continue;
    const std::int64_t bidx = c.periodic ? ((a % c.L) + c.L) % c.L : a;
    if ((bidx & 1) != parity) continue;
    ly.k.push_back(k);
    ly.b.push_back(bidx);
  }
  // Sites of [cover_lo, cover_hi) that no bond of the layer touches (open ends).
  for (std::int64_t k = cover_lo; k < cover_hi; ++k) {
    const std::int64_t s = c.s0 + k;
    if (!c.periodic && (s < 0 || s >= c.L)) continue;
    const std::int64_t site = c.periodic ? ((s % c.L) + c.L) % c.L : s;
    std::int64_t bb;
    int li;
    if (!detail::bond_of(c.L, c.periodic, c.nb, site, parity, bb, li)) ly.alone.push_back(k);
  }
  ly.G.assign(ly.k.size() * static_cast<std::size_t>(dim(c) * dim(c)), 0.0);
}

void fetch_gates(LayerCtx& c, const GateSource& g, std::int64_t t) {
  const int d = dim(c);
  for (Layer& ly : c.layer)
    for (std::size_t j = 0; j < ly.b.size(); ++j) {
      double* G = ly.G.data() + j * static_cast<std::size_t>(d * d);
      if (c.w == 1) {
        const Mat2 A = detail::gate2(g, ly.b[j], t, c.op);
        for (int r = 0; r < 2; ++r)
          for (int s = 0; s < 2; ++s) G[r * 2 + s] = static_cast<double>(A(r, s));
      } else {
        const Mat4 A = detail::gate4(g, ly.b[j], t);
        for (int r = 0; r < 4; ++r)
          for (int s = 0; s < 4; ++s) G[r * 4 + s] = static_cast<double>(A(r, s));
      }
    }
  if (c.has_site) {
    c.site.resize(static_cast<std::size_t>(4 * c.m));
    for (std::int64_t k = 0; k < c.m; ++k) {
      const Mat2 s = detail::site_gate(g, c.s0 + k, t);
      for (int r = 0; r < 2; ++r)
        for (int q = 0; q < 2; ++q) c.site[static_cast<std::size_t>(4 * k + 2 * r + q)] = static_cast<double>(s(r, q));
    }
  }
  // Exactness: integer entries beyond 2^53 are not doubles. Choose the
  // smallest exact storage (the same on every rank is not needed).
  double big = 0.0;
  for (const Layer& ly : c.layer)
    for (double v : ly.G) big = std::max(big, v < 0 ? -v : v);
  if (big > 9007199254740992.0) throw SolverError("layer operator: a gate entry exceeds 2^53");
  c.store = big <= 127 ? GateStore::Int8 : big <= 16777216.0 ? GateStore::Float : GateStore::Double;
  for (Layer& ly : c.layer) {
    ly.Gf.clear();
    ly.Gi.clear();
    if (c.store == GateStore::Float) ly.Gf.assign(ly.G.begin(), ly.G.end());
    if (c.store == GateStore::Int8)
      for (double v : ly.G) ly.Gi.push_back(static_cast<std::int8_t>(v));
  }
}

template <int d, class T>
inline void apply_gate(const T* G, const double* in, double* out) {
  double v[d];
  for (int q = 0; q < d; ++q) v[q] = in[q];  // in and out may not alias, but be safe
  for (int r = 0; r < d; ++r) {
    double acc = 0.0;
    for (int q = 0; q < d; ++q) acc += static_cast<double>(G[r * d + q]) * v[q];
    out[r] = acc;
  }
}

template <class T>
const T* gates(const Layer& ly);
template <>
const double* gates<double>(const Layer& ly) { return ly.G.data(); }
template <>
const float* gates<float>(const Layer& ly) { return ly.Gf.data(); }
template <>
const std::int8_t* gates<std::int8_t>(const Layer& ly) { return ly.Gi.data(); }

// y = (site layer) (second layer) (first layer) x, in chunks of kChunk sites:
// the first layer fills u on [c0 - 1, c1] (needs x on [c0 - 2, c1 + 1], halo
// included), the second writes y on [c0, c1).
template <int d, class T>
void apply_layers(LayerCtx& c, const double* x, double* y) {
  constexpr int w = d / 2;
  const std::int64_t m = c.m;
  // Halo: the first/last two sites go to the neighbours.
  MPI_Sendrecv(x + w * (m - 2), 2 * w, MPI_DOUBLE, c.right, 71, c.ghostL.data(), 2 * w, MPI_DOUBLE,
               c.left, 71, c.comm, MPI_STATUS_IGNORE);
  MPI_Sendrecv(x, 2 * w, MPI_DOUBLE, c.left, 72, c.ghostR.data(), 2 * w, MPI_DOUBLE, c.right, 72,
               c.comm, MPI_STATUS_IGNORE);
  auto in_at = [&](std::int64_t k, int j) -> double {
    if (k < 0) return c.ghostL[static_cast<std::size_t>(w * (k + 2) + j)];
    if (k >= m) return c.ghostR[static_cast<std::size_t>(w * (k - m) + j)];
    return x[w * k + j];
  };
  const Layer& A = c.layer[0];
  const Layer& B = c.layer[1];
  const T* GA = gates<T>(A);
  const T* GB = gates<T>(B);
  constexpr int dd = d * d;
  std::size_t ja = 0, jb = 0, aa = 0, ab = 0;
  for (std::int64_t c0 = 0; c0 < m; c0 += kChunk) {
    const std::int64_t c1 = std::min(m, c0 + kChunk);
    // u position k is stored at u[w * (k - c0 + 1)], k in [c0 - 1, c1].
    double* u = c.u.data() - w * (c0 - 1);
    while (ja < A.k.size() && A.k[ja] < c0 - 2) ++ja;
    for (std::size_t j = ja; j < A.k.size() && A.k[j] <= c1; ++j) {
      const std::int64_t k = A.k[j];
      const T* G = GA + j * dd;
      if (k >= c0 - 1 && k + 1 <= c1 && k >= 0 && k + 1 < m) {
        apply_gate<d, T>(G, x + w * k, u + w * k);
      } else {
        double in[d], out[d];
        for (int q = 0; q < w; ++q) {
          in[q] = in_at(k, q);
          in[w + q] = in_at(k + 1, q);
        }
        apply_gate<d, T>(G, in, out);
        for (int q = 0; q < w; ++q) {
          if (k >= c0 - 1 && k <= c1) u[w * k + q] = out[q];
          if (k + 1 >= c0 - 1 && k + 1 <= c1) u[w * (k + 1) + q] = out[w + q];
        }
      }
    }
    while (aa < A.alone.size() && A.alone[aa] < c0 - 1) ++aa;
    for (std::size_t j = aa; j < A.alone.size() && A.alone[j] <= c1; ++j)
      for (int q = 0; q < w; ++q) u[w * A.alone[j] + q] = in_at(A.alone[j], q);
    while (jb < B.k.size() && B.k[jb] < c0 - 1) ++jb;
    for (std::size_t j = jb; j < B.k.size() && B.k[j] < c1; ++j) {
      const std::int64_t k = B.k[j];
      const T* G = GB + j * dd;
      if (k >= c0 && k + 1 < c1) {
        apply_gate<d, T>(G, u + w * k, y + w * k);
      } else {
        double out[d];
        apply_gate<d, T>(G, u + w * k, out);
        for (int q = 0; q < w; ++q) {
          if (k >= c0 && k < c1) y[w * k + q] = out[q];
          if (k + 1 >= c0 && k + 1 < c1) y[w * (k + 1) + q] = out[w + q];
        }
      }
    }
    while (ab < B.alone.size() && B.alone[ab] < c0) ++ab;
    for (std::size_t j = ab; j < B.alone.size() && B.alone[j] < c1; ++j)
      for (int q = 0; q < w; ++q) y[w * B.alone[j] + q] = u[w * B.alone[j] + q];
  }
  if (c.has_site)
    for (std::int64_t k = 0; k < m; ++k) {
      const double* g = c.site.data() + 4 * k;
      const double a = y[2 * k], b = y[2 * k + 1];
      y[2 * k] = g[0] * a + g[1] * b;
      y[2 * k + 1] = g[2] * a + g[3] * b;
    }
}

// y = A^p x (no one-site layer) in tiles of kTile sites, each carried through
// all p applications while it is in cache: one pass over x, y and the gates
// instead of p. One application maps values on positions [lo, hi) to values
// on [lo + 2, hi - 2) (first layer: bonds with both sites inside, giving
// [lo + 1, hi - 1); second layer likewise), so a tile [c0, c1) starts from x
// on [c0 - 2p, c1 + 2p), with halos of 2p sites from the neighbouring ranks
// (every rank owns >= 2p sites: checked by layer_power_available). Each
// output is computed by the same operations as p calls of apply_layers, so
// the result is the same to the bit.
template <int d, class T>
void apply_power(LayerCtx& c, int p, const double* x, double* y) {
  constexpr int w = d / 2;
  constexpr int dd = d * d;
  const std::int64_t m = c.m, H = 2 * static_cast<std::int64_t>(p);
  const std::size_t nh = static_cast<std::size_t>(w * H);
  c.haloL.assign(nh, 0.0);
  c.haloR.assign(nh, 0.0);
  MPI_Sendrecv(x + w * (m - H), static_cast<int>(nh), MPI_DOUBLE, c.right, 73, c.haloL.data(),
               static_cast<int>(nh), MPI_DOUBLE, c.left, 73, c.comm, MPI_STATUS_IGNORE);
  MPI_Sendrecv(x, static_cast<int>(nh), MPI_DOUBLE, c.left, 74, c.haloR.data(), static_cast<int>(nh),
               MPI_DOUBLE, c.right, 74, c.comm, MPI_STATUS_IGNORE);
  const std::size_t span = static_cast<std::size_t>(w * (kTile + 2 * H));
  c.t0.assign(span, 0.0);
  c.t1.assign(span, 0.0);
  c.tu.assign(span, 0.0);
  const Layer& A = c.layer[0];
  const Layer& B = c.layer[1];
  const T* GA = gates<T>(A);
  const T* GB = gates<T>(B);
  for (std::int64_t c0 = 0; c0 < m; c0 += kTile) {
    const std::int64_t c1 = std::min(m, c0 + kTile);
    const std::int64_t base = c0 - H;  // buffer index of position k: w * (k - base)
    double* in = c.t0.data() - w * base;
    double* out = c.t1.data() - w * base;
    double* u = c.tu.data() - w * base;
    // Load x on [c0 - H, c1 + H).
    for (std::int64_t k = c0 - H; k < c1 + H; ++k)
      for (int q = 0; q < w; ++q)
        in[w * k + q] = k < 0    ? c.haloL[static_cast<std::size_t>(w * (k + H) + q)]
                        : k >= m ? c.haloR[static_cast<std::size_t>(w * (k - m) + q)]
                                 : x[w * k + q];
    // The bonds of the tile (both sites in [c0 - H, c1 + H)) and their gates
    // as doubles, converted once for all p steps. Bond positions advance by 2
    // (layer_power_available checks that the lists are regular).
    const std::size_t a0 = static_cast<std::size_t>(std::lower_bound(A.k.begin(), A.k.end(), c0 - H) - A.k.begin());
    const std::size_t a1 = static_cast<std::size_t>(std::upper_bound(A.k.begin(), A.k.end(), c1 + H - 2) - A.k.begin());
    const std::size_t b0 = static_cast<std::size_t>(std::lower_bound(B.k.begin(), B.k.end(), c0 - H) - B.k.begin());
    const std::size_t b1 = static_cast<std::size_t>(std::upper_bound(B.k.begin(), B.k.end(), c1 + H - 2) - B.k.begin());
    c.ga.resize((a1 - a0) * dd);
    c.gb.resize((b1 - b0) * dd);
    for (std::size_t i = 0; i < (a1 - a0) * dd; ++i) c.ga[i] = static_cast<double>(GA[a0 * dd + i]);
    for (std::size_t i = 0; i < (b1 - b0) * dd; ++i) c.gb[i] = static_cast<double>(GB[b0 * dd + i]);
    std::int64_t lo = c0 - H, hi = c1 + H;
    for (int step = 0; step < p; ++step) {
      // First layer: bonds k in [lo, hi - 2], sites left alone in [lo, hi).
      if (a1 > a0) {
        const std::int64_t ka = A.k[a0];
        const std::int64_t j0 = std::max<std::int64_t>(0, (lo - ka + 1) / 2);
        const std::int64_t j1 = std::min<std::int64_t>(static_cast<std::int64_t>(a1 - a0), (hi - 2 - ka) / 2 + 1);
        const double* G = c.ga.data();
        for (std::int64_t j = j0; j < j1; ++j)
          apply_gate<d, double>(G + j * dd, in + w * (ka + 2 * j), u + w * (ka + 2 * j));
      }
      std::size_t j = static_cast<std::size_t>(std::lower_bound(A.alone.begin(), A.alone.end(), lo) - A.alone.begin());
      for (; j < A.alone.size() && A.alone[j] < hi; ++j)
        for (int q = 0; q < w; ++q) u[w * A.alone[j] + q] = in[w * A.alone[j] + q];
      // Second layer on u, valid on [lo + 1, hi - 1): bonds k in [lo + 1, hi - 3].
      if (b1 > b0) {
        const std::int64_t kb = B.k[b0];
        const std::int64_t j0 = std::max<std::int64_t>(0, (lo + 1 - kb + 1) / 2);
        const std::int64_t j1 = std::min<std::int64_t>(static_cast<std::int64_t>(b1 - b0), (hi - 3 - kb) / 2 + 1);
        const double* G = c.gb.data();
        for (std::int64_t jj = j0; jj < j1; ++jj)
          apply_gate<d, double>(G + jj * dd, u + w * (kb + 2 * jj), out + w * (kb + 2 * jj));
      }
      j = static_cast<std::size_t>(std::lower_bound(B.alone.begin(), B.alone.end(), lo + 1) - B.alone.begin());
      for (; j < B.alone.size() && B.alone[j] < hi - 1; ++j)
        for (int q = 0; q < w; ++q) out[w * B.alone[j] + q] = u[w * B.alone[j] + q];
      lo += 2;
      hi -= 2;
      std::swap(in, out);
    }
    std::copy(in + w * c0, in + w * c1, y + w * c0);
  }
}

template <int d>
void apply_power_dispatch(LayerCtx& c, int p, const double* x, double* y) {
  switch (c.store) {
    case GateStore::Int8: apply_power<d, std::int8_t>(c, p, x, y); break;
    case GateStore::Float: apply_power<d, float>(c, p, x, y); break;
    case GateStore::Double: apply_power<d, double>(c, p, x, y); break;
  }
}

template <int d>
void apply_dispatch(LayerCtx& c, const double* x, double* y) {
  switch (c.store) {
    case GateStore::Int8: apply_layers<d, std::int8_t>(c, x, y); break;
    case GateStore::Float: apply_layers<d, float>(c, x, y); break;
    case GateStore::Double: apply_layers<d, double>(c, x, y); break;
  }
}

PetscErrorCode shell_mult(Mat S, Vec x, Vec y) {
  LayerCtx* c;
  PetscCall(MatShellGetContext(S, &c));
  return with_local_arrays(x, y, [c](const PetscScalar* xa, PetscScalar* ya) {
    if (c->w == 1)
      apply_dispatch<2>(*c, xa, ya);
    else
      apply_dispatch<4>(*c, xa, ya);
  });
}

PetscErrorCode shell_destroy(Mat S) {
  LayerCtx* c;
  PetscCall(MatShellGetContext(S, &c));
  delete c;
  return 0;
}

bool is_layer_operator(Mat A) {
  PetscBool shell = PETSC_FALSE;
  if (PetscObjectTypeCompare(reinterpret_cast<PetscObject>(A), MATSHELL, &shell) || !shell) return false;
  void (*f)(void) = nullptr;
  if (MatShellGetOperation(A, MATOP_MULT, &f)) return false;
  return f == reinterpret_cast<void (*)(void)>(shell_mult);
}

}  // namespace

bool layer_power_available(Mat A, int p) {
  int ok = 0;
  LayerCtx* c = nullptr;
  MPI_Comm comm = PetscObjectComm(reinterpret_cast<PetscObject>(A));
  if (is_layer_operator(A) && MatShellGetContext(A, &c) == 0 && c)
    ok = p >= 2 && p <= kMaxFused && !c->has_site && c->regular && c->m >= 2 * p ? 1 : 0;
  MPI_Allreduce(MPI_IN_PLACE, &ok, 1, MPI_INT, MPI_MIN, comm);
  return ok == 1;
}

PetscErrorCode layer_power_mult(Mat A, int p, Vec x, Vec y) {
  LayerCtx* c;
  PetscCall(MatShellGetContext(A, &c));
  return with_local_arrays(x, y, [c, p](const PetscScalar* xa, PetscScalar* ya) {
    if (c->w == 1)
      apply_power_dispatch<2>(*c, p, xa, ya);
    else
      apply_power_dispatch<4>(*c, p, xa, ya);
  });
}

DistMatrix make_layer_operator(MPI_Comm comm, const GateSource& g, std::int64_t t, Operator op) {
  DistMatrix d;
  d.op = op;
  d.layout = op == Operator::S ? Layout::Interleaved : Layout::Global;
  d.L = g.L;
  auto* c = new LayerCtx;
  bool owned = false;
  try {
    collective_phase(comm, [&] {
      if (g.L < 2) throw ModelError("lattice: L = " + std::to_string(g.L) + ", needs at least 2 sites");
      if (g.boundary == Boundary::Periodic && g.L % 2 != 0)
        throw ModelError("lattice: L = " + std::to_string(g.L) + " is odd; a periodic brick-wall needs even L");
      if (op != Operator::S && g.has_site_layer)
        throw ModelError("circuit has a one-site layer: not position-class, no " +
                         std::string(operator_name(op)) + " block (use Operator::S)");
      const std::int64_t N = op == Operator::S ? 2 * g.L : g.L;
      check_index_limit(N, operator_name(op));
      d.n = static_cast<PetscInt>(N);
      PetscInt units = static_cast<PetscInt>(g.L), mine = PETSC_DECIDE;
      TORAL_PCALL(PetscSplitOwnership(comm, &mine, &units));
      PetscInt start = 0;
      MPI_Exscan(&mine, &start, 1, MPIU_INT, MPI_SUM, comm);
      int rank = 0, size = 1;
      MPI_Comm_rank(comm, &rank);
      MPI_Comm_size(comm, &size);
      if (rank == 0) start = 0;
      int small = mine < 2 ? 1 : 0;
      MPI_Allreduce(MPI_IN_PLACE, &small, 1, MPI_INT, MPI_MAX, comm);
      if (small)
        throw SolverError("layer operator: every rank must own at least 2 sites (L = " +
                                 std::to_string(g.L) + " on " + std::to_string(size) + " ranks)");
      c->comm = comm;
      c->w = op == Operator::S ? 2 : 1;
      c->L = g.L;
      c->s0 = start;
      c->m = mine;
      c->nb = g.bond_count();
      c->periodic = g.boundary == Boundary::Periodic;
      c->op = op;
      c->has_site = op == Operator::S && g.has_site_layer;
      if (c->periodic) {
        c->left = (rank + size - 1) % size;
        c->right = (rank + 1) % size;
      } else {
        c->left = rank > 0 ? rank - 1 : MPI_PROC_NULL;
        c->right = rank + 1 < size ? rank + 1 : MPI_PROC_NULL;
      }
      // First applied layer: M, M^-T, S start with the even bonds; M^-1 with the odd ones.
      const int first = op == Operator::MInverse ? 1 : 0;
      // The bond lists reach kReach sites beyond the owned ones (apply_layers
      // uses [-2, m] and [-1, m - 1]; apply_power up to 2 kMaxFused).
      build_layer(*c, c->layer[0], first, -kReach, c->m + kReach, -kReach, c->m + kReach);
      build_layer(*c, c->layer[1], 1 - first, -kReach, c->m + kReach, -kReach, c->m + kReach);
      c->regular = true;
      for (const Layer& ly : c->layer)
        for (std::size_t j = 1; j < ly.k.size(); ++j) c->regular = c->regular && ly.k[j] == ly.k[j - 1] + 2;
      c->ghostL.assign(static_cast<std::size_t>(2 * c->w), 0.0);
      c->ghostR.assign(static_cast<std::size_t>(2 * c->w), 0.0);
      c->u.assign(static_cast<std::size_t>(c->w * (kChunk + 2)), 0.0);
      fetch_gates(*c, g, t);
      d.row_begin = static_cast<PetscInt>(c->w * start);
      d.row_end = static_cast<PetscInt>(c->w * (start + mine));
    });
    const PetscInt mloc = d.row_end - d.row_begin;
    TORAL_PCALL(MatCreateShell(comm, mloc, mloc, d.n, d.n, c, d.A.out()));
    owned = true;
    TORAL_PCALL(MatShellSetOperation(d.mat(), MATOP_MULT, reinterpret_cast<void (*)(void)>(shell_mult)));
    TORAL_PCALL(MatShellSetOperation(d.mat(), MATOP_DESTROY, reinterpret_cast<void (*)(void)>(shell_destroy)));
  } catch (...) {
    if (!owned) delete c;
    throw;
  }
  return d;
}

void layer_operator_set_period(const DistMatrix& d, const GateSource& g, std::int64_t t) {
  LayerCtx* c;
  TORAL_PCALL(MatShellGetContext(d.mat(), &c));
  collective_phase(c->comm, [&] { fetch_gates(*c, g, t); });
}

}  // namespace toral
