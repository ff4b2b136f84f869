// A small RAII layer over the HDF5 C API (parallel build, 1.10+).
//
// Every handle is move-only and closes itself. Every HDF5 call that fails is
// turned into h5::Error, whose message names the HDF5 function, the file and
// the object path, plus the innermost messages of the HDF5 error stack.
// HDF5's own automatic error printing is silenced while these functions run.
//
// Collective rules (parallel files): every function that creates an object,
// writes an attribute or writes a dataset must be called by every rank of the
// file's communicator, in the same order, with identical arguments (attribute
// values included). Dataset writes (write_rows) take per-rank rows; a rank
// with no rows still calls it with an empty list.
#pragma once
// The deprecated MPI C++ bindings are not used; skipping them also avoids
// their -Wextra warnings.
#ifndef OMPI_SKIP_MPICXX
#define OMPI_SKIP_MPICXX 1
#endif
#ifndef MPICH_SKIP_MPICXX
#define MPICH_SKIP_MPICXX 1
#endif
#include <hdf5.h>
#include <mpi.h>

#include <cstddef>
#include <cstdint>
#include <span>
#include <stdexcept>
#include <string>
#include <vector>

namespace toral::h5 {

struct Error : std::runtime_error {
  using std::runtime_error::runtime_error;
};

// Disables HDF5's automatic error-stack printing for its lifetime and
// restores the previous handler afterwards. Nesting is fine.
class QuietErrors {
 public:
  QuietErrors();
  ~QuietErrors();
  QuietErrors(const QuietErrors&) = delete;
  QuietErrors& operator=(const QuietErrors&) = delete;

 private:
  H5E_auto2_t func_ = nullptr;
  void* data_ = nullptr;
  bool saved_ = false;
};

// Builds the exception text for a failed call and clears the HDF5 stack.
[[noreturn]] void fail(const char* call, const std::string& file, const std::string& object,
                       const std::string& detail = {});

// A move-only owner of one hid_t, closed with Close. `file` and `path` say
// what the id refers to, for error messages.
using CloseFn = herr_t (*)(hid_t);

class Object {
 public:
  Object() = default;
  Object(hid_t id, CloseFn close, std::string file, std::string path, bool mpio = false)
      : id_(id), close_(close), file_(std::move(file)), path_(std::move(path)), mpio_(mpio) {}
  ~Object() { reset(); }
  Object(Object&& o) noexcept { swap(o); }
  Object& operator=(Object&& o) noexcept {
    if (this != &o) {
      reset();
      swap(o);
    }
    return *this;
  }
  Object(const Object&) = delete;
  Object& operator=(const Object&) = delete;

  hid_t id() const { return id_; }
  explicit operator bool() const { return id_ >= 0; }
  const std::string& file() const { return file_; }
  const std::string& path() const { return path_; }
  // True when the object lives in a file opened with the MPI-IO driver
  // (writes are then collective).
  bool mpio() const { return mpio_; }

  // Closes now and throws h5::Error if HDF5 reports a failure.
  void close();
  // Closes silently (destructor semantics).
  void reset() noexcept;

 private:
  void swap(Object& o) noexcept {
    std::swap(id_, o.id_);
    std::swap(close_, o.close_);
    std::swap(file_, o.file_);
    std::swap(path_, o.path_);
    std::swap(mpio_, o.mpio_);
  }
  hid_t id_ = H5I_INVALID_HID;
  CloseFn close_ = nullptr;
  std::string file_, path_;
  bool mpio_ = false;
};

// Distinct types so that a dataspace is not passed where a dataset is wanted.
struct File : Object {
  using Object::Object;
};
struct Group : Object {
  using Object::Object;
};
struct Dataset : Object {
  using Object::Object;
};
struct Dataspace : Object {
  using Object::Object;
};
struct PropList : Object {
  using Object::Object;
};
struct Attribute : Object {
  using Object::Object;
};
struct Datatype : Object {
  using Object::Object;
};

// ---- files
// Creates (truncating) `path` with the MPI-IO driver on `comm`. Collective.
File create_file_parallel(const std::string& path, MPI_Comm comm);
// Serial open (sec2 driver), read-only unless `write`.
File open_file(const std::string& path, bool write = false);
// Root group "/" of a file.
Group root(const File& f);

// ---- groups and datasets (collective on parallel files)
Group create_group(const Object& parent, const std::string& name);
Group open_group(const Object& parent, const std::string& name);
bool exists(const Object& parent, const std::string& name);

// `file_type` is the on-disk type (e.g. H5T_IEEE_F64LE). When `nan_fill`
// the fill value is NaN (float types only). Contiguous layout, allocated at
// creation; the fill value is recorded but never written (every element is
// expected to be written exactly once).
Dataset create_dataset(const Object& parent, const std::string& name, hid_t file_type,
                       const std::vector<hsize_t>& dims, bool nan_fill = false);
Dataset open_dataset(const Object& parent, const std::string& name);
std::vector<hsize_t> dims(const Dataset& d);

// ---- dimension scales (HDF5 high-level H5DS; collective on parallel files)
// Marks a 1-D dataset as a dimension scale named `name`.
void make_scale(const Dataset& d, const std::string& name);
// Attaches `scale` to dimension `dim` of `d`.
void attach_scale(const Dataset& d, const Dataset& scale, unsigned dim);
// Serial: the path of the first scale attached to each dimension ("" none).
std::vector<std::string> scale_names(const Dataset& d);

// ---- datatypes
// Fixed-length string of `size` bytes, NUL-terminated, UTF-8.
Datatype fixed_string_type(std::size_t size);
// Variable-length string, UTF-8 (attributes only).
Datatype vl_string_type();

// Truncates `s` to at most `max_bytes` bytes without splitting a UTF-8
// multi-byte sequence.
std::string truncate_utf8(const std::string& s, std::size_t max_bytes);

// Packs strings into consecutive `size`-byte NUL-padded slots for a
// fixed_string_type(size) dataset; each is truncated with truncate_utf8 to
// size - 1 bytes so that it stays NUL-terminated.
std::vector<char> pack_fixed_strings(const std::vector<std::string>& v, std::size_t size);

// ---- writes
// Writes the rows `rows` (global row indices along dimension 0, sorted
// strictly ascending) of dataset `d` from `buf`, which holds rows.size()
// consecutive rows, each of prod(dims[1:]) elements of `mem_type`.
// Consecutive indices are merged into hyperslab blocks (a regular pattern,
// e.g. a cyclic distribution, becomes one strided hyperslab; otherwise the
// blocks are combined with H5S_SELECT_OR, pairwise, so that n irregular
// blocks cost O(n log n) rather than HDF5's quadratic one-by-one OR).
// Collective on parallel files:
// every rank calls it; a rank with no rows passes an empty list and makes an
// empty selection.
void write_rows(const Dataset& d, std::span<const std::int64_t> rows, const void* buf,
                hid_t mem_type);
// Convenience: the whole dataset written by the rank(s) with is_writer (use
// exactly one, e.g. rank 0), the others taking part with empty selections.
// Serial files: pass is_writer = true.
void write_all(const Dataset& d, bool is_writer, const void* buf, hid_t mem_type);

// ---- attributes (collective on parallel files; identical values on all ranks)
void set_attr(const Object& o, const std::string& name, const std::string& value);
void set_attr(const Object& o, const std::string& name, const char* value);
void set_attr(const Object& o, const std::string& name, const std::vector<std::string>& values);
void set_attr(const Object& o, const std::string& name, std::int64_t value);
void set_attr(const Object& o, const std::string& name, double value);
void set_attr(const Object& o, const std::string& name, const std::vector<std::int64_t>& values);

// ---- serial reads (tests, tools)
bool has_attr(const Object& o, const std::string& name);
// Reads a scalar or 1-element string attribute, fixed- or variable-length.
std::string read_attr_string(const Object& o, const std::string& name);
// Reads a 1-D (or scalar) string attribute, fixed- or variable-length.
std::vector<std::string> read_attr_strings(const Object& o, const std::string& name);
std::int64_t read_attr_int(const Object& o, const std::string& name);
double read_attr_double(const Object& o, const std::string& name);
// Whole-dataset reads converted to the native type.
std::vector<double> read_doubles(const Dataset& d);
std::vector<std::int64_t> read_int64s(const Dataset& d);
std::vector<std::int32_t> read_int32s(const Dataset& d);
// Fixed-length string dataset, trailing NULs stripped.
std::vector<std::string> read_fixed_strings(const Dataset& d);

}  // namespace toral::h5
