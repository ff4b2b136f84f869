// Template part of petsc_util.hpp (included from there only).
#pragma once
#include <exception>

#include "model.hpp"

namespace toral {

template <class F>
void collective_phase(MPI_Comm comm, F&& f) {
  int kind = 0;
  std::string msg;
  try {
    f();
  } catch (const ModelError& e) {
    kind = 1;
    msg = e.what();
  } catch (const OverflowError& e) {
    kind = 2;
    msg = e.what();
  } catch (const SolverError& e) {
    kind = 3;
    msg = e.what();
  } catch (const InvalidInput& e) {
    kind = 4;
    msg = e.what();
  } catch (const std::exception& e) {
    kind = 5;  // a bug or a resource failure (kernels/errors.hpp)
    msg = e.what();
  }
  agree_on_error(comm, kind, msg);
}

template <class F>
PetscErrorCode with_local_arrays(Vec x, Vec y, F&& f) {
  const PetscScalar* xa;
  PetscScalar* ya;
  PetscCall(VecGetArrayRead(x, &xa));
  PetscCall(VecGetArray(y, &ya));
  try {
    f(xa, ya);
  } catch (const std::exception& e) {
    VecRestoreArrayRead(x, &xa);
    VecRestoreArray(y, &ya);
    SETERRQ(PETSC_COMM_SELF, PETSC_ERR_LIB, "%s", e.what());
  }
  PetscCall(VecRestoreArrayRead(x, &xa));
  PetscCall(VecRestoreArray(y, &ya));
  return 0;
}

}  // namespace toral
