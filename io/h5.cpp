#include "h5.hpp"

#include <hdf5_hl.h>

#include <algorithm>
#include <limits>
#include <numeric>
#include <sstream>

namespace toral::h5 {

namespace {

// Collects the descriptions of the current HDF5 error stack, innermost last.
herr_t collect_error(unsigned, const H5E_error2_t* e, void* data) {
  auto* out = static_cast<std::vector<std::string>*>(data);
  std::string s;
  if (e->func_name) s += e->func_name;
  if (e->desc && *e->desc) {
    if (!s.empty()) s += ": ";
    s += e->desc;
  }
  if (!s.empty()) out->push_back(std::move(s));
  return 0;
}

std::string stack_text() {
  std::vector<std::string> msgs;
  H5Ewalk2(H5E_DEFAULT, H5E_WALK_DOWNWARD, collect_error, &msgs);
  H5Eclear2(H5E_DEFAULT);
  if (msgs.empty()) return {};
  // The outermost entry repeats the API call; the innermost say why.
  std::string out;
  const std::size_t keep = 3;
  const std::size_t from = msgs.size() > keep ? msgs.size() - keep : 0;
  for (std::size_t i = from; i < msgs.size(); ++i) {
    if (!out.empty()) out += "; ";
    out += msgs[i];
  }
  return out;
}

// Throws unless `id` is a valid id.
hid_t check_id(hid_t id, const char* call, const std::string& file, const std::string& object) {
  if (id < 0) fail(call, file, object);
  return id;
}
void check(herr_t r, const char* call, const std::string& file, const std::string& object) {
  if (r < 0) fail(call, file, object);
}

std::string child_path(const Object& parent, const std::string& name) {
  const std::string& p = parent.path();
  if (p.empty() || p == "/") return "/" + name;
  return p + "/" + name;
}

Dataspace make_space(const std::vector<hsize_t>& d, const std::string& file,
                     const std::string& object) {
  hid_t id = d.empty() ? H5Screate(H5S_SCALAR)
                       : H5Screate_simple(static_cast<int>(d.size()), d.data(), nullptr);
  return Dataspace(check_id(id, "H5Screate_simple", file, object), H5Sclose, file, object);
}

Dataspace space_of(const Dataset& d) {
  return Dataspace(check_id(H5Dget_space(d.id()), "H5Dget_space", d.file(), d.path()), H5Sclose,
                   d.file(), d.path());
}

std::vector<hsize_t> extent(const Dataspace& s) {
  int rank = H5Sget_simple_extent_ndims(s.id());
  if (rank < 0) fail("H5Sget_simple_extent_ndims", s.file(), s.path());
  std::vector<hsize_t> d(static_cast<std::size_t>(rank));
  if (rank > 0 && H5Sget_simple_extent_dims(s.id(), d.data(), nullptr) < 0)
    fail("H5Sget_simple_extent_dims", s.file(), s.path());
  return d;
}

PropList transfer_props(const Object& o) {
  PropList p(check_id(H5Pcreate(H5P_DATASET_XFER), "H5Pcreate(xfer)", o.file(), o.path()),
             H5Pclose, o.file(), o.path());
  if (o.mpio()) check(H5Pset_dxpl_mpio(p.id(), H5FD_MPIO_COLLECTIVE), "H5Pset_dxpl_mpio", o.file(),
                      o.path());
  return p;
}

Attribute recreate_attr(const Object& o, const std::string& name, hid_t type,
                        const Dataspace& space) {
  const std::string where = o.path() + " (attribute " + name + ")";
  htri_t ex = H5Aexists(o.id(), name.c_str());
  if (ex < 0) fail("H5Aexists", o.file(), where);
  if (ex > 0) check(H5Adelete(o.id(), name.c_str()), "H5Adelete", o.file(), where);
  hid_t a = H5Acreate2(o.id(), name.c_str(), type, space.id(), H5P_DEFAULT, H5P_DEFAULT);
  return Attribute(check_id(a, "H5Acreate2", o.file(), where), H5Aclose, o.file(), where,
                   o.mpio());
}

Attribute open_attr(const Object& o, const std::string& name) {
  const std::string where = o.path() + " (attribute " + name + ")";
  hid_t a = H5Aopen(o.id(), name.c_str(), H5P_DEFAULT);
  return Attribute(check_id(a, "H5Aopen", o.file(), where), H5Aclose, o.file(), where, o.mpio());
}

std::int64_t npoints(const Dataspace& s) {
  hssize_t n = H5Sget_simple_extent_npoints(s.id());
  if (n < 0) fail("H5Sget_simple_extent_npoints", s.file(), s.path());
  return static_cast<std::int64_t>(n);
}

// The union of row blocks `runs` (start, length) of a dataspace with extent
// `dd`, as a new dataspace. Adding blocks one by one with H5S_SELECT_OR costs
// HDF5 1.10 time quadratic in the number of blocks; instead the blocks are
// combined pairwise (H5Scombine_select with H5S_SELECT_OR) like a binary
// counter, which costs O(n log n) and keeps O(log n) dataspaces alive.
Dataspace union_of_runs(const Dataspace& like, const std::vector<std::pair<hsize_t, hsize_t>>& runs,
                        const std::vector<hsize_t>& dd, const Object& o) {
  const std::size_t rank = dd.size();
  std::vector<hsize_t> start(rank, 0), count(rank, 1), block(dd);
  std::vector<std::pair<Dataspace, int>> stack;  // (selection, level)
  auto combine = [&](const Dataspace& a, const Dataspace& b) {
    return Dataspace(check_id(H5Scombine_select(a.id(), H5S_SELECT_OR, b.id()),
                              "H5Scombine_select", o.file(), o.path()),
                     H5Sclose, o.file(), o.path());
  };
  for (const auto& [s, n] : runs) {
    Dataspace leaf(check_id(H5Scopy(like.id()), "H5Scopy", o.file(), o.path()), H5Sclose, o.file(),
                   o.path());
    start[0] = s;
    block[0] = n;
    check(H5Sselect_hyperslab(leaf.id(), H5S_SELECT_SET, start.data(), nullptr, count.data(),
                              block.data()),
          "H5Sselect_hyperslab", o.file(), o.path());
    stack.emplace_back(std::move(leaf), 0);
    while (stack.size() >= 2 && stack[stack.size() - 1].second == stack[stack.size() - 2].second) {
      Dataspace merged = combine(stack[stack.size() - 2].first, stack[stack.size() - 1].first);
      const int level = stack.back().second + 1;
      stack.pop_back();
      stack.pop_back();
      stack.emplace_back(std::move(merged), level);
    }
  }
  while (stack.size() >= 2) {
    Dataspace merged = combine(stack[stack.size() - 2].first, stack[stack.size() - 1].first);
    const int level = stack.back().second + 1;
    stack.pop_back();
    stack.pop_back();
    stack.emplace_back(std::move(merged), level);
  }
  return std::move(stack.back().first);
}

}  // namespace

// ---------------------------------------------------------------- errors

QuietErrors::QuietErrors() {
  if (H5Eget_auto2(H5E_DEFAULT, &func_, &data_) >= 0) {
    saved_ = true;
    H5Eset_auto2(H5E_DEFAULT, nullptr, nullptr);
  }
}

QuietErrors::~QuietErrors() {
  if (saved_) H5Eset_auto2(H5E_DEFAULT, func_, data_);
}

void fail(const char* call, const std::string& file, const std::string& object,
          const std::string& detail) {
  std::string stack = stack_text();
  std::ostringstream m;
  m << "HDF5 error: " << call << " failed";
  if (!object.empty()) m << " for '" << object << "'";
  if (!file.empty()) m << " in file '" << file << "'";
  if (!detail.empty()) m << ": " << detail;
  if (!stack.empty()) m << (detail.empty() ? ": " : " [") << stack << (detail.empty() ? "" : "]");
  throw Error(m.str());
}

// ---------------------------------------------------------------- Object

void Object::close() {
  if (id_ < 0) return;
  QuietErrors q;
  hid_t id = id_;
  id_ = H5I_INVALID_HID;
  if (close_ && close_(id) < 0) fail("close", file_, path_);
}

void Object::reset() noexcept {
  if (id_ < 0) return;
  QuietErrors q;
  if (close_) close_(id_);
  H5Eclear2(H5E_DEFAULT);
  id_ = H5I_INVALID_HID;
}

// ---------------------------------------------------------------- files

File create_file_parallel(const std::string& path, MPI_Comm comm) {
  QuietErrors q;
  PropList fapl(check_id(H5Pcreate(H5P_FILE_ACCESS), "H5Pcreate(fapl)", path, "/"), H5Pclose,
                path, "/");
  check(H5Pset_fapl_mpio(fapl.id(), comm, MPI_INFO_NULL), "H5Pset_fapl_mpio", path, "/");
  // Metadata reads and writes collective: avoids read storms and keeps the
  // metadata cache identical on all ranks.
  check(H5Pset_all_coll_metadata_ops(fapl.id(), true), "H5Pset_all_coll_metadata_ops", path, "/");
  check(H5Pset_coll_metadata_write(fapl.id(), true), "H5Pset_coll_metadata_write", path, "/");
  hid_t f = H5Fcreate(path.c_str(), H5F_ACC_TRUNC, H5P_DEFAULT, fapl.id());
  return File(check_id(f, "H5Fcreate", path, "/"), H5Fclose, path, "/", true);
}

File open_file(const std::string& path, bool write) {
  QuietErrors q;
  hid_t f = H5Fopen(path.c_str(), write ? H5F_ACC_RDWR : H5F_ACC_RDONLY, H5P_DEFAULT);
  return File(check_id(f, "H5Fopen", path, "/"), H5Fclose, path, "/", false);
}

Group root(const File& f) {
  QuietErrors q;
  hid_t g = H5Gopen2(f.id(), "/", H5P_DEFAULT);
  return Group(check_id(g, "H5Gopen2", f.file(), "/"), H5Gclose, f.file(), "/", f.mpio());
}

// ---------------------------------------------------------------- groups, datasets

Group create_group(const Object& parent, const std::string& name) {
  QuietErrors q;
  const std::string p = child_path(parent, name);
  hid_t g = H5Gcreate2(parent.id(), name.c_str(), H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
  return Group(check_id(g, "H5Gcreate2", parent.file(), p), H5Gclose, parent.file(), p,
               parent.mpio());
}

Group open_group(const Object& parent, const std::string& name) {
  QuietErrors q;
  const std::string p = child_path(parent, name);
  hid_t g = H5Gopen2(parent.id(), name.c_str(), H5P_DEFAULT);
  return Group(check_id(g, "H5Gopen2", parent.file(), p), H5Gclose, parent.file(), p,
               parent.mpio());
}

bool exists(const Object& parent, const std::string& name) {
  QuietErrors q;
  htri_t r = H5Lexists(parent.id(), name.c_str(), H5P_DEFAULT);
  if (r < 0) fail("H5Lexists", parent.file(), child_path(parent, name));
  return r > 0;
}

Dataset create_dataset(const Object& parent, const std::string& name, hid_t file_type,
                       const std::vector<hsize_t>& d, bool nan_fill) {
  QuietErrors q;
  const std::string p = child_path(parent, name);
  Dataspace space = make_space(d, parent.file(), p);
  PropList dcpl(check_id(H5Pcreate(H5P_DATASET_CREATE), "H5Pcreate(dcpl)", parent.file(), p),
                H5Pclose, parent.file(), p);
  check(H5Pset_layout(dcpl.id(), H5D_CONTIGUOUS), "H5Pset_layout", parent.file(), p);
  check(H5Pset_alloc_time(dcpl.id(), H5D_ALLOC_TIME_EARLY), "H5Pset_alloc_time", parent.file(), p);
  if (nan_fill) {
    const double nan = std::numeric_limits<double>::quiet_NaN();
    check(H5Pset_fill_value(dcpl.id(), H5T_NATIVE_DOUBLE, &nan), "H5Pset_fill_value",
          parent.file(), p);
  }
  check(H5Pset_fill_time(dcpl.id(), H5D_FILL_TIME_NEVER), "H5Pset_fill_time", parent.file(), p);
  hid_t ds = H5Dcreate2(parent.id(), name.c_str(), file_type, space.id(), H5P_DEFAULT, dcpl.id(),
                        H5P_DEFAULT);
  return Dataset(check_id(ds, "H5Dcreate2", parent.file(), p), H5Dclose, parent.file(), p,
                 parent.mpio());
}

Dataset open_dataset(const Object& parent, const std::string& name) {
  QuietErrors q;
  const std::string p = child_path(parent, name);
  hid_t ds = H5Dopen2(parent.id(), name.c_str(), H5P_DEFAULT);
  return Dataset(check_id(ds, "H5Dopen2", parent.file(), p), H5Dclose, parent.file(), p,
                 parent.mpio());
}

void make_scale(const Dataset& d, const std::string& name) {
  QuietErrors q;
  check(H5DSset_scale(d.id(), name.c_str()), "H5DSset_scale", d.file(), d.path());
}

void attach_scale(const Dataset& d, const Dataset& scale, unsigned dim) {
  QuietErrors q;
  check(H5DSattach_scale(d.id(), scale.id(), dim), "H5DSattach_scale", d.file(),
        d.path() + " (dim " + std::to_string(dim) + " to " + scale.path() + ")");
}

std::vector<std::string> scale_names(const Dataset& d) {
  QuietErrors q;
  std::vector<std::string> out;
  const std::vector<hsize_t> ext = dims(d);
  for (unsigned k = 0; k < ext.size(); ++k) {
    std::string name;
    auto visit = [](hid_t, unsigned, hid_t scale, void* data) -> herr_t {
      char buf[1024];
      const ssize_t n = H5Iget_name(scale, buf, sizeof buf);
      if (n > 0) *static_cast<std::string*>(data) = std::string(buf, static_cast<std::size_t>(std::min<ssize_t>(n, 1023)));
      return 1;
    };
    if (H5DSget_num_scales(d.id(), k) > 0) H5DSiterate_scales(d.id(), k, nullptr, visit, &name);
    H5Eclear2(H5E_DEFAULT);
    out.push_back(name);
  }
  return out;
}

std::vector<hsize_t> dims(const Dataset& d) {
  QuietErrors q;
  return extent(space_of(d));
}

// ---------------------------------------------------------------- datatypes

Datatype fixed_string_type(std::size_t size) {
  QuietErrors q;
  Datatype t(check_id(H5Tcopy(H5T_C_S1), "H5Tcopy", "", "string type"), H5Tclose, "",
             "string type");
  check(H5Tset_size(t.id(), size), "H5Tset_size", "", "string type");
  check(H5Tset_strpad(t.id(), H5T_STR_NULLTERM), "H5Tset_strpad", "", "string type");
  check(H5Tset_cset(t.id(), H5T_CSET_UTF8), "H5Tset_cset", "", "string type");
  return t;
}

Datatype vl_string_type() {
  QuietErrors q;
  Datatype t(check_id(H5Tcopy(H5T_C_S1), "H5Tcopy", "", "string type"), H5Tclose, "",
             "string type");
  check(H5Tset_size(t.id(), H5T_VARIABLE), "H5Tset_size", "", "string type");
  check(H5Tset_cset(t.id(), H5T_CSET_UTF8), "H5Tset_cset", "", "string type");
  return t;
}

std::string truncate_utf8(const std::string& s, std::size_t max_bytes) {
  if (s.size() <= max_bytes) return s;
  std::size_t n = max_bytes;
  // Step back over continuation bytes (10xxxxxx) to the start of the
  // sequence that would be cut, and drop that whole sequence.
  while (n > 0 && (static_cast<unsigned char>(s[n]) & 0xC0) == 0x80) --n;
  return s.substr(0, n);
}

std::vector<char> pack_fixed_strings(const std::vector<std::string>& v, std::size_t size) {
  std::vector<char> out(v.size() * size, '\0');
  if (size == 0) return out;
  for (std::size_t i = 0; i < v.size(); ++i) {
    const std::string t = truncate_utf8(v[i], size - 1);
    std::copy(t.begin(), t.end(), out.begin() + static_cast<std::ptrdiff_t>(i * size));
  }
  return out;
}

// ---------------------------------------------------------------- writes

void write_rows(const Dataset& d, std::span<const std::int64_t> rows, const void* buf,
                hid_t mem_type) {
  QuietErrors q;
  Dataspace fs = space_of(d);
  const std::vector<hsize_t> dd = extent(fs);
  if (dd.empty()) throw Error("write_rows: dataset '" + d.path() + "' in file '" + d.file() +
                              "' is scalar");
  hsize_t row_elems = 1;
  for (std::size_t i = 1; i < dd.size(); ++i) row_elems *= dd[i];
  for (std::size_t i = 0; i < rows.size(); ++i) {
    if (rows[i] < 0 || static_cast<hsize_t>(rows[i]) >= dd[0] || (i > 0 && rows[i] <= rows[i - 1]))
      throw Error("write_rows: row indices for '" + d.path() + "' in file '" + d.file() +
                  "' must be sorted, unique and below " + std::to_string(dd[0]));
  }
  // Nothing to store: the dataset has no elements. The extent is the same on
  // every rank, so every rank skips together.
  if (dd[0] == 0 || row_elems == 0) return;

  const std::size_t rank = dd.size();
  std::vector<hsize_t> start(rank, 0), stride(rank, 1), count(rank, 1), block(rank, 1);
  for (std::size_t i = 1; i < rank; ++i) block[i] = dd[i];

  if (rows.empty()) {
    check(H5Sselect_none(fs.id()), "H5Sselect_none", d.file(), d.path());
  } else {
    // Runs of consecutive indices.
    std::vector<std::pair<hsize_t, hsize_t>> runs;  // (start, length)
    for (std::size_t i = 0; i < rows.size();) {
      std::size_t j = i + 1;
      while (j < rows.size() && rows[j] == rows[j - 1] + 1) ++j;
      runs.emplace_back(static_cast<hsize_t>(rows[i]), static_cast<hsize_t>(j - i));
      i = j;
    }
    bool regular = true;
    const hsize_t len = runs[0].second;
    const hsize_t step = runs.size() > 1 ? runs[1].first - runs[0].first : len;
    for (std::size_t r = 1; r < runs.size() && regular; ++r)
      regular = runs[r].second == len && runs[r].first - runs[r - 1].first == step;
    if (regular) {
      start[0] = runs[0].first;
      stride[0] = step;
      count[0] = runs.size();
      block[0] = len;
      check(H5Sselect_hyperslab(fs.id(), H5S_SELECT_SET, start.data(), stride.data(), count.data(),
                                block.data()),
            "H5Sselect_hyperslab", d.file(), d.path());
    } else {
      fs = union_of_runs(fs, runs, dd, d);
    }
  }

  std::vector<hsize_t> mdims = dd;
  mdims[0] = std::max<hsize_t>(rows.size(), 1);
  Dataspace ms = make_space(mdims, d.file(), d.path());
  if (rows.empty()) check(H5Sselect_none(ms.id()), "H5Sselect_none", d.file(), d.path());

  PropList dxpl = transfer_props(d);
  static const double dummy[1] = {0.0};
  const void* data = (rows.empty() || !buf) ? static_cast<const void*>(dummy) : buf;
  check(H5Dwrite(d.id(), mem_type, ms.id(), fs.id(), dxpl.id(), data), "H5Dwrite", d.file(),
        d.path());
}

void write_all(const Dataset& d, bool is_writer, const void* buf, hid_t mem_type) {
  const std::vector<hsize_t> dd = dims(d);
  if (dd.empty()) throw Error("write_all: dataset '" + d.path() + "' is scalar");
  std::vector<std::int64_t> rows;
  if (is_writer) {
    rows.resize(dd[0]);
    std::iota(rows.begin(), rows.end(), std::int64_t{0});
  }
  write_rows(d, rows, buf, mem_type);
}

// ---------------------------------------------------------------- attributes

void set_attr(const Object& o, const std::string& name, const std::string& value) {
  QuietErrors q;
  Datatype t = vl_string_type();
  Dataspace s = make_space({}, o.file(), o.path());
  Attribute a = recreate_attr(o, name, t.id(), s);
  const char* p = value.c_str();
  check(H5Awrite(a.id(), t.id(), &p), "H5Awrite", a.file(), a.path());
  a.close();
}

void set_attr(const Object& o, const std::string& name, const char* value) {
  set_attr(o, name, std::string(value ? value : ""));
}

void set_attr(const Object& o, const std::string& name, const std::vector<std::string>& values) {
  QuietErrors q;
  Datatype t = vl_string_type();
  Dataspace s = make_space({static_cast<hsize_t>(values.size())}, o.file(), o.path());
  Attribute a = recreate_attr(o, name, t.id(), s);
  std::vector<const char*> p;
  for (const auto& v : values) p.push_back(v.c_str());
  if (!p.empty()) check(H5Awrite(a.id(), t.id(), p.data()), "H5Awrite", a.file(), a.path());
  a.close();
}

void set_attr(const Object& o, const std::string& name, std::int64_t value) {
  QuietErrors q;
  Dataspace s = make_space({}, o.file(), o.path());
  Attribute a = recreate_attr(o, name, H5T_STD_I64LE, s);
  check(H5Awrite(a.id(), H5T_NATIVE_INT64, &value), "H5Awrite", a.file(), a.path());
  a.close();
}

void set_attr(const Object& o, const std::string& name, double value) {
  QuietErrors q;
  Dataspace s = make_space({}, o.file(), o.path());
  Attribute a = recreate_attr(o, name, H5T_IEEE_F64LE, s);
  check(H5Awrite(a.id(), H5T_NATIVE_DOUBLE, &value), "H5Awrite", a.file(), a.path());
  a.close();
}

void set_attr(const Object& o, const std::string& name, const std::vector<std::int64_t>& values) {
  QuietErrors q;
  Dataspace s = make_space({static_cast<hsize_t>(values.size())}, o.file(), o.path());
  Attribute a = recreate_attr(o, name, H5T_STD_I64LE, s);
  if (!values.empty())
    check(H5Awrite(a.id(), H5T_NATIVE_INT64, values.data()), "H5Awrite", a.file(), a.path());
  a.close();
}

// ---------------------------------------------------------------- reads

bool has_attr(const Object& o, const std::string& name) {
  QuietErrors q;
  htri_t r = H5Aexists(o.id(), name.c_str());
  if (r < 0) fail("H5Aexists", o.file(), o.path() + " (attribute " + name + ")");
  return r > 0;
}

std::vector<std::string> read_attr_strings(const Object& o, const std::string& name) {
  QuietErrors q;
  Attribute a = open_attr(o, name);
  Datatype ft(check_id(H5Aget_type(a.id()), "H5Aget_type", a.file(), a.path()), H5Tclose,
              a.file(), a.path());
  if (H5Tget_class(ft.id()) != H5T_STRING)
    throw Error("attribute '" + a.path() + "' in file '" + a.file() + "' is not a string");
  Dataspace s(check_id(H5Aget_space(a.id()), "H5Aget_space", a.file(), a.path()), H5Sclose,
              a.file(), a.path());
  H5S_class_t cls = H5Sget_simple_extent_type(s.id());
  if (cls == H5S_NULL) return {};
  const std::int64_t n = npoints(s);
  std::vector<std::string> out;
  if (n == 0) return out;
  htri_t vl = H5Tis_variable_str(ft.id());
  if (vl < 0) fail("H5Tis_variable_str", a.file(), a.path());
  if (vl > 0) {
    Datatype mt = vl_string_type();
    check(H5Tset_cset(mt.id(), H5Tget_cset(ft.id())), "H5Tset_cset", a.file(), a.path());
    std::vector<char*> p(static_cast<std::size_t>(n), nullptr);
    check(H5Aread(a.id(), mt.id(), p.data()), "H5Aread", a.file(), a.path());
    for (char* c : p) out.emplace_back(c ? c : "");
    H5Dvlen_reclaim(mt.id(), s.id(), H5P_DEFAULT, p.data());
  } else {
    const std::size_t sz = H5Tget_size(ft.id());
    std::vector<char> buf(sz * static_cast<std::size_t>(n) + 1, '\0');
    Datatype mt(check_id(H5Tcopy(ft.id()), "H5Tcopy", a.file(), a.path()), H5Tclose, a.file(),
                a.path());
    check(H5Aread(a.id(), mt.id(), buf.data()), "H5Aread", a.file(), a.path());
    for (std::int64_t i = 0; i < n; ++i) {
      const char* b = buf.data() + i * sz;
      std::size_t len = 0;
      while (len < sz && b[len] != '\0') ++len;
      out.emplace_back(b, len);
    }
  }
  return out;
}

std::string read_attr_string(const Object& o, const std::string& name) {
  auto v = read_attr_strings(o, name);
  if (v.size() != 1)
    throw Error("attribute '" + name + "' of '" + o.path() + "' in file '" + o.file() +
                "' holds " + std::to_string(v.size()) + " strings, expected 1");
  return v[0];
}

std::int64_t read_attr_int(const Object& o, const std::string& name) {
  QuietErrors q;
  Attribute a = open_attr(o, name);
  std::int64_t v = 0;
  check(H5Aread(a.id(), H5T_NATIVE_INT64, &v), "H5Aread", a.file(), a.path());
  return v;
}

double read_attr_double(const Object& o, const std::string& name) {
  QuietErrors q;
  Attribute a = open_attr(o, name);
  double v = 0;
  check(H5Aread(a.id(), H5T_NATIVE_DOUBLE, &v), "H5Aread", a.file(), a.path());
  return v;
}

namespace {
template <class T>
std::vector<T> read_all(const Dataset& d, hid_t mem_type) {
  QuietErrors q;
  Dataspace s = space_of(d);
  std::vector<T> v(static_cast<std::size_t>(npoints(s)));
  if (!v.empty())
    check(H5Dread(d.id(), mem_type, H5S_ALL, H5S_ALL, H5P_DEFAULT, v.data()), "H5Dread", d.file(),
          d.path());
  return v;
}
}  // namespace

std::vector<double> read_doubles(const Dataset& d) { return read_all<double>(d, H5T_NATIVE_DOUBLE); }
std::vector<std::int64_t> read_int64s(const Dataset& d) {
  return read_all<std::int64_t>(d, H5T_NATIVE_INT64);
}
std::vector<std::int32_t> read_int32s(const Dataset& d) {
  return read_all<std::int32_t>(d, H5T_NATIVE_INT32);
}

std::vector<std::string> read_fixed_strings(const Dataset& d) {
  QuietErrors q;
  Datatype ft(check_id(H5Dget_type(d.id()), "H5Dget_type", d.file(), d.path()), H5Tclose, d.file(),
              d.path());
  if (H5Tget_class(ft.id()) != H5T_STRING || H5Tis_variable_str(ft.id()) != 0)
    throw Error("dataset '" + d.path() + "' in file '" + d.file() +
                "' is not a fixed-length string dataset");
  const std::size_t sz = H5Tget_size(ft.id());
  Dataspace s = space_of(d);
  const std::int64_t n = npoints(s);
  std::vector<char> buf(sz * static_cast<std::size_t>(n) + 1, '\0');
  if (n > 0)
    check(H5Dread(d.id(), ft.id(), H5S_ALL, H5S_ALL, H5P_DEFAULT, buf.data()), "H5Dread", d.file(),
          d.path());
  std::vector<std::string> out;
  for (std::int64_t i = 0; i < n; ++i) {
    const char* b = buf.data() + i * sz;
    std::size_t len = 0;
    while (len < sz && b[len] != '\0') ++len;
    out.emplace_back(b, len);
  }
  return out;
}

}  // namespace toral::h5
