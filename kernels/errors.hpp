// The exceptions of the kernels and solvers, by what went wrong. The driver
// turns each into its point status (driver/compute.cpp, point_failure;
// io/record.hpp, PointStatus):
//
//   InvalidInput   an argument outside what the kernel accepts (a bad gate,
//                  a circuit of the wrong shape, a parameter out of range).
//                  ModelError (model.hpp, an invalid gate or circuit) and
//                  RealRootsError (real_roots.hpp) are InvalidInputs.
//                  -> invalid_model
//   OverflowError  exact int64 arithmetic overflowed (intmat.hpp checks every
//                  operation). -> overflow
//   SolverError    a numerical method failed: it did not converge, could not
//                  isolate roots within its precision limit, met a size
//                  limit of the library, or a LAPACK / GSL / PETSc call
//                  failed. -> solver_failed
//
// Anything else that escapes a kernel (std::logic_error for a broken
// invariant, std::bad_alloc, ...) is a bug or a resource failure, recorded as
// internal_error with its message; kernels do not catch it.
#pragma once
#include <stdexcept>
#include <string>

namespace toral {

struct InvalidInput : std::invalid_argument {
  using std::invalid_argument::invalid_argument;
};

struct OverflowError : std::runtime_error {
  using std::runtime_error::runtime_error;
};

struct SolverError : std::runtime_error {
  using std::runtime_error::runtime_error;
};

}  // namespace toral
