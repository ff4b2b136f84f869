// Small helpers shared by the distributed solvers: PETSc error codes turned
// into exceptions, move-only owners of PETSc/SLEPc objects, and collective
// error agreement (an error raised on one rank is raised on every rank, so
// no rank is left waiting in a collective call).
#pragma once
#include <mpi.h>
#include <petscmat.h>
#include <slepcbv.h>
#include <slepceps.h>

#include <stdexcept>
#include <string>
#include <utility>

namespace toral {

// A PETSc or SLEPc call returned a non-zero error code.
struct PetscFailure : std::runtime_error {
  using std::runtime_error::runtime_error;
};

[[noreturn]] void throw_petsc_failure(PetscErrorCode code, const char* call, const char* file,
                                      int line);

#define TORAL_PCALL(call)                                                      \
  do {                                                                         \
    const PetscErrorCode toral_ierr_ = (call);                                 \
    if (toral_ierr_) ::toral::throw_petsc_failure(toral_ierr_, #call, __FILE__, __LINE__); \
  } while (0)

// Move-only owner of a PETSc object with a XxxDestroy(&obj) function.
template <class T, PetscErrorCode (*Destroy)(T*)>
class PetscOwner {
 public:
  PetscOwner() = default;
  explicit PetscOwner(T obj) : obj_(obj) {}
  PetscOwner(const PetscOwner&) = delete;
  PetscOwner& operator=(const PetscOwner&) = delete;
  PetscOwner(PetscOwner&& o) noexcept : obj_(std::exchange(o.obj_, nullptr)) {}
  PetscOwner& operator=(PetscOwner&& o) noexcept {
    if (this != &o) {
      reset();
      obj_ = std::exchange(o.obj_, nullptr);
    }
    return *this;
  }
  ~PetscOwner() { reset(); }
  void reset() {
    if (obj_) Destroy(&obj_);  // a destroy error cannot be reported from here
    obj_ = nullptr;
  }
  T get() const { return obj_; }
  T* out() {  // for XxxCreate(..., owner.out())
    reset();
    return &obj_;
  }
  explicit operator bool() const { return obj_ != nullptr; }

 private:
  T obj_ = nullptr;
};

using UniqueMat = PetscOwner<Mat, MatDestroy>;
using UniqueVec = PetscOwner<Vec, VecDestroy>;
using UniqueEPS = PetscOwner<EPS, EPSDestroy>;
using UniqueBV = PetscOwner<BV, BVDestroy>;

// Collective error agreement. Every rank of `comm` calls it after a local
// phase that may have failed (`local_error` empty = success). If any rank
// failed, all ranks throw the same exception: the message (and kind) of the
// lowest failing rank, prefixed by "rank r: " when comm has several ranks.
// kind: 0 = none, 1 = ModelError, 2 = OverflowError, 3 = SolverError, 4 =
// another InvalidInput, 5 = anything else (rethrown as std::logic_error: an
// internal error; kernels/errors.hpp).
void agree_on_error(MPI_Comm comm, int local_kind, const std::string& local_error);

// Runs f() and converts an exception into (kind, message) for agree_on_error.
template <class F>
void collective_phase(MPI_Comm comm, F&& f);

// Runs f(const PetscScalar* x, PetscScalar* y) on the local arrays of x and
// y and restores them on every path; an exception becomes a PETSc error, so
// none ever crosses PETSc (for MatShell / PCShell callbacks).
template <class F>
PetscErrorCode with_local_arrays(Vec x, Vec y, F&& f);

// True once SlepcInitialize has been called (and SlepcFinalize not yet).
bool slepc_ready();

}  // namespace toral

#include "petsc_util_impl.hpp"
