// RAII holders for FLINT and arb handles used by the exact kernels: one
// template instead of a hand-written struct per type. A holder owns one
// initialised object, is neither copied nor moved, and clears it on exit.
//
//   Poly p;                 fmpz_poly_set_si(p.get(), 3);
//   Mat m(4, 4);            fmpz_mat_entry(m.get(), 0, 0)
#pragma once
#include <acb.h>
#include <acb_poly.h>
#include <arb.h>
#include <arb_mat.h>
#include <arf.h>
#include <mag.h>
#include <flint/fmpz.h>
#include <flint/fmpz_mat.h>
#include <flint/fmpz_mpoly.h>
#include <flint/fmpz_mpoly_factor.h>
#include <flint/fmpz_poly.h>
#include <flint/fmpz_poly_factor.h>
#include <flint/nmod_mat.h>
#include <flint/nmod_poly.h>

namespace toral::flint {

// T is the FLINT struct type (e.g. fmpz_poly_struct); Init and Clear are the
// library's own init and clear functions.
template <class T, void (*Init)(T*), void (*Clear)(T*)>
class Holder {
 public:
  Holder() { Init(&v_); }
  ~Holder() { Clear(&v_); }
  Holder(const Holder&) = delete;
  Holder& operator=(const Holder&) = delete;
  T* get() { return &v_; }
  const T* get() const { return &v_; }

 private:
  T v_;
};

namespace detail {
// fmpz_init and arb_init are inline in the headers; wrap them so that their
// addresses are ordinary function pointers.
inline void fmpz_init_w(fmpz* x) { fmpz_init(x); }
inline void fmpz_clear_w(fmpz* x) { fmpz_clear(x); }
inline void arb_init_w(arb_struct* x) { arb_init(x); }
inline void arb_clear_w(arb_struct* x) { arb_clear(x); }
inline void arf_init_w(arf_struct* x) { arf_init(x); }
inline void arf_clear_w(arf_struct* x) { arf_clear(x); }
inline void mag_init_w(mag_struct* x) { mag_init(x); }
inline void mag_clear_w(mag_struct* x) { mag_clear(x); }
inline void acb_init_w(acb_struct* x) { acb_init(x); }
inline void acb_clear_w(acb_struct* x) { acb_clear(x); }
inline void fmpz_poly_init_w(fmpz_poly_struct* x) { fmpz_poly_init(x); }
inline void fmpz_poly_clear_w(fmpz_poly_struct* x) { fmpz_poly_clear(x); }
inline void fmpz_poly_factor_init_w(fmpz_poly_factor_struct* x) { fmpz_poly_factor_init(x); }
inline void fmpz_poly_factor_clear_w(fmpz_poly_factor_struct* x) { fmpz_poly_factor_clear(x); }
inline void acb_poly_init_w(acb_poly_struct* x) { acb_poly_init(x); }
inline void acb_poly_clear_w(acb_poly_struct* x) { acb_poly_clear(x); }
}  // namespace detail

using Int = Holder<fmpz, detail::fmpz_init_w, detail::fmpz_clear_w>;
using Ball = Holder<arb_struct, detail::arb_init_w, detail::arb_clear_w>;
using Float = Holder<arf_struct, detail::arf_init_w, detail::arf_clear_w>;  // arf_t
using Mag = Holder<mag_struct, detail::mag_init_w, detail::mag_clear_w>;
using CBall = Holder<acb_struct, detail::acb_init_w, detail::acb_clear_w>;
using Poly = Holder<fmpz_poly_struct, detail::fmpz_poly_init_w, detail::fmpz_poly_clear_w>;
using PolyFactors =
    Holder<fmpz_poly_factor_struct, detail::fmpz_poly_factor_init_w, detail::fmpz_poly_factor_clear_w>;
using CPoly = Holder<acb_poly_struct, detail::acb_poly_init_w, detail::acb_poly_clear_w>;

// Types whose init takes extra arguments.
class Mat {
 public:
  Mat(slong rows, slong cols) { fmpz_mat_init(m_, rows, cols); }
  ~Mat() { fmpz_mat_clear(m_); }
  Mat(const Mat&) = delete;
  Mat& operator=(const Mat&) = delete;
  fmpz_mat_struct* get() { return m_; }
  const fmpz_mat_struct* get() const { return m_; }

 private:
  fmpz_mat_t m_;
};

class BallMat {
 public:
  BallMat(slong rows, slong cols) { arb_mat_init(m_, rows, cols); }
  ~BallMat() { arb_mat_clear(m_); }
  BallMat(const BallMat&) = delete;
  BallMat& operator=(const BallMat&) = delete;
  arb_mat_struct* get() { return m_; }
  const arb_mat_struct* get() const { return m_; }

 private:
  arb_mat_t m_;
};

class CVec {
 public:
  explicit CVec(slong n) : p_(_acb_vec_init(n)), n_(n) {}
  ~CVec() { _acb_vec_clear(p_, n_); }
  CVec(const CVec&) = delete;
  CVec& operator=(const CVec&) = delete;
  acb_ptr get() { return p_; }
  acb_srcptr get() const { return p_; }
  acb_ptr operator[](slong i) { return p_ + i; }
  slong size() const { return n_; }

 private:
  acb_ptr p_;
  slong n_;
};

// Matrices and polynomials modulo a word-size n.
class NModMat {
 public:
  NModMat(slong rows, slong cols, mp_limb_t n) { nmod_mat_init(m_, rows, cols, n); }
  ~NModMat() { nmod_mat_clear(m_); }
  NModMat(const NModMat&) = delete;
  NModMat& operator=(const NModMat&) = delete;
  nmod_mat_struct* get() { return m_; }
  const nmod_mat_struct* get() const { return m_; }

 private:
  nmod_mat_t m_;
};

class NModPoly {
 public:
  explicit NModPoly(mp_limb_t n) { nmod_poly_init(p_, n); }
  ~NModPoly() { nmod_poly_clear(p_); }
  NModPoly(const NModPoly&) = delete;
  NModPoly& operator=(const NModPoly&) = delete;
  nmod_poly_struct* get() { return p_; }
  const nmod_poly_struct* get() const { return p_; }

 private:
  nmod_poly_t p_;
};

// A CRT / multi-modular reduction tree over n word primes with its scratch
// space (fmpz_comb_t and fmpz_comb_temp_t). The primes must outlive it.
class Comb {
 public:
  Comb(const mp_limb_t* primes, slong n) {
    fmpz_comb_init(c_, primes, n);
    fmpz_comb_temp_init(t_, c_);
  }
  ~Comb() {
    fmpz_comb_temp_clear(t_);
    fmpz_comb_clear(c_);
  }
  Comb(const Comb&) = delete;
  Comb& operator=(const Comb&) = delete;
  const fmpz_comb_struct* comb() const { return c_; }
  fmpz_comb_temp_struct* temp() { return t_; }

 private:
  fmpz_comb_t c_;
  fmpz_comb_temp_t t_;
};

// Multivariate polynomials live in a context.
class MPolyCtx {
 public:
  explicit MPolyCtx(slong nvars) { fmpz_mpoly_ctx_init(c_, nvars, ORD_LEX); }
  ~MPolyCtx() { fmpz_mpoly_ctx_clear(c_); }
  MPolyCtx(const MPolyCtx&) = delete;
  MPolyCtx& operator=(const MPolyCtx&) = delete;
  fmpz_mpoly_ctx_struct* get() { return c_; }
  const fmpz_mpoly_ctx_struct* get() const { return c_; }

 private:
  fmpz_mpoly_ctx_t c_;
};

class MPoly {
 public:
  explicit MPoly(const MPolyCtx& ctx) : ctx_(ctx.get()) { fmpz_mpoly_init(p_, ctx_); }
  ~MPoly() { fmpz_mpoly_clear(p_, ctx_); }
  MPoly(const MPoly&) = delete;
  MPoly& operator=(const MPoly&) = delete;
  fmpz_mpoly_struct* get() { return p_; }
  const fmpz_mpoly_struct* get() const { return p_; }

 private:
  const fmpz_mpoly_ctx_struct* ctx_;
  fmpz_mpoly_t p_;
};

class MPolyFactors {
 public:
  explicit MPolyFactors(const MPolyCtx& ctx) : ctx_(ctx.get()) { fmpz_mpoly_factor_init(f_, ctx_); }
  ~MPolyFactors() { fmpz_mpoly_factor_clear(f_, ctx_); }
  MPolyFactors(const MPolyFactors&) = delete;
  MPolyFactors& operator=(const MPolyFactors&) = delete;
  fmpz_mpoly_factor_struct* get() { return f_; }

 private:
  const fmpz_mpoly_ctx_struct* ctx_;
  fmpz_mpoly_factor_t f_;
};

}  // namespace toral::flint
