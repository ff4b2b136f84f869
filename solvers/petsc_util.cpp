#include "petsc_util.hpp"
#include "errors.hpp"

#include <vector>

#include "model.hpp"

namespace toral {

void throw_petsc_failure(PetscErrorCode code, const char* call, const char* file, int line) {
  const char* text = nullptr;
  PetscErrorMessage(code, &text, nullptr);
  throw PetscFailure(std::string("PETSc error ") + std::to_string(static_cast<int>(code)) + " (" +
                     (text ? text : "unknown") + ") in " + call + " at " + file + ":" +
                     std::to_string(line));
}

void agree_on_error(MPI_Comm comm, int local_kind, const std::string& local_error) {
  int size = 1, rank = 0;
  MPI_Comm_size(comm, &size);
  MPI_Comm_rank(comm, &rank);
  // Lowest failing rank (size when none failed).
  int mine = local_kind ? rank : size, first = size;
  MPI_Allreduce(&mine, &first, 1, MPI_INT, MPI_MIN, comm);
  if (first == size) return;
  int kind = local_kind;
  int len = static_cast<int>(local_error.size());
  MPI_Bcast(&kind, 1, MPI_INT, first, comm);
  MPI_Bcast(&len, 1, MPI_INT, first, comm);
  std::vector<char> buf(static_cast<std::size_t>(len) + 1, '\0');
  if (rank == first) std::copy(local_error.begin(), local_error.end(), buf.begin());
  MPI_Bcast(buf.data(), len, MPI_CHAR, first, comm);
  std::string msg(buf.data(), static_cast<std::size_t>(len));
  if (size > 1) msg = "rank " + std::to_string(first) + ": " + msg;
  switch (kind) {
    case 1: throw ModelError(msg);
    case 2: throw OverflowError(msg);
    case 4: throw InvalidInput(msg);
    case 5: throw std::logic_error(msg);
    default: throw SolverError(msg);
  }
}

bool slepc_ready() {
  PetscBool init = PETSC_FALSE;
  SlepcInitialized(&init);
  return init == PETSC_TRUE;
}

}  // namespace toral
