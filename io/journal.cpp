#include "journal.hpp"

#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <bit>
#include <cerrno>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <utility>

#include "atomic_file.hpp"

namespace toral {

namespace {

// Every field of PointRecord is serialised by visit() below, in declaration
// order. A new field must be added there (and kJournalVersion bumped, and
// io/result_write.cpp and io/result_read.cpp taught to write and read it);
// this assertion fires on the reference platform when PointRecord changes
// size, as a reminder.
#if defined(__GLIBCXX__) && defined(__x86_64__) && defined(__linux__)
static_assert(sizeof(PointRecord) == 592,
              "PointRecord changed: update visit() in io/journal.cpp (and bump kJournalVersion), "
              "io/result_write.cpp (writer), io/result_read.cpp (read_results) and docs/layout.md, "
              "then this size");
#endif

constexpr char kMagic[8] = {'T', 'O', 'R', 'A', 'L', 'J', 'N', 'L'};
constexpr std::uint32_t kMaxHashBytes = 4096;
constexpr std::uint64_t kFrameOverhead = 16;  // length + checksum

// ---------------------------------------------------------------- encoding

class Out {
 public:
  void u32(std::uint32_t x) {
    for (int i = 0; i < 4; ++i) b_.push_back(static_cast<char>((x >> (8 * i)) & 0xff));
  }
  void u64(std::uint64_t x) {
    for (int i = 0; i < 8; ++i) b_.push_back(static_cast<char>((x >> (8 * i)) & 0xff));
  }
  void bytes(const void* p, std::size_t n) { b_.append(static_cast<const char*>(p), n); }

  void operator()(const std::int32_t& x) { u32(static_cast<std::uint32_t>(x)); }
  void operator()(const std::int64_t& x) { u64(static_cast<std::uint64_t>(x)); }
  void operator()(const double& x) { u64(std::bit_cast<std::uint64_t>(x)); }
  void operator()(const std::string& s) {
    u64(s.size());
    bytes(s.data(), s.size());
  }
  void operator()(const std::vector<double>& v) {
    u64(v.size());
    for (double x : v) (*this)(x);
  }
  void operator()(const std::vector<std::int64_t>& v) {
    u64(v.size());
    for (std::int64_t x : v) (*this)(x);
  }
  void operator()(const std::vector<FieldValue>& v) {
    u64(v.size());
    for (const FieldValue& x : v) {
      (*this)(x.shape);
      (*this)(x.f);
      (*this)(x.i);
    }
  }
  std::string& str() { return b_; }

 private:
  std::string b_;
};

class In {
 public:
  In(const char* p, std::size_t n) : p_(p), n_(n) {}
  bool ok() const { return ok_; }
  bool done() const { return ok_ && pos_ == n_; }
  std::size_t left() const { return n_ - pos_; }

  std::uint32_t u32() {
    if (!take(4)) return 0;
    std::uint32_t x = 0;
    for (int i = 0; i < 4; ++i) x |= static_cast<std::uint32_t>(byte(pos_ - 4 + i)) << (8 * i);
    return x;
  }
  std::uint64_t u64() {
    if (!take(8)) return 0;
    std::uint64_t x = 0;
    for (int i = 0; i < 8; ++i) x |= static_cast<std::uint64_t>(byte(pos_ - 8 + i)) << (8 * i);
    return x;
  }

  void operator()(std::int32_t& x) { x = static_cast<std::int32_t>(u32()); }
  void operator()(std::int64_t& x) { x = static_cast<std::int64_t>(u64()); }
  void operator()(double& x) { x = std::bit_cast<double>(u64()); }
  void operator()(std::string& s) {
    const std::uint64_t n = u64();
    if (!ok_ || n > left()) return fail();
    s.assign(p_ + pos_, static_cast<std::size_t>(n));
    pos_ += static_cast<std::size_t>(n);
  }
  template <class T>
  void vec(std::vector<T>& v) {
    const std::uint64_t n = u64();
    if (!ok_ || n > left() / 8) return fail();  // never allocate beyond the payload
    v.resize(static_cast<std::size_t>(n));
    for (T& x : v) (*this)(x);
  }
  void operator()(std::vector<double>& v) { vec(v); }
  void operator()(std::vector<std::int64_t>& v) { vec(v); }
  void operator()(std::vector<FieldValue>& v) {
    const std::uint64_t n = u64();
    if (!ok_ || n > left() / 24) return fail();  // three counts per value
    v.resize(static_cast<std::size_t>(n));
    for (FieldValue& x : v) {
      (*this)(x.shape);
      (*this)(x.f);
      (*this)(x.i);
    }
  }

 private:
  unsigned char byte(std::size_t i) const { return static_cast<unsigned char>(p_[i]); }
  bool take(std::size_t k) {
    if (!ok_ || k > left()) {
      fail();
      return false;
    }
    pos_ += k;
    return true;
  }
  void fail() { ok_ = false; }
  const char* p_;
  std::size_t n_;
  std::size_t pos_ = 0;
  bool ok_ = true;
};

// The payload field order (format version 4). Shared by both directions.
template <class A, class R>
void visit(A& a, R& r) {
  a(r.index);
  a(r.row);
  a(r.params);
  a(r.status);
  a(r.message);
  a(r.method);
  a(r.wall_time);
  // /chaos
  a(r.lambda_max);
  a(r.ks_rate);
  a(r.ks_density);
  a(r.unstable_count);
  a(r.zero_count);
  a(r.zero_certified);
  a(r.exponents);
  a(r.exponent_errors);
  a(r.pairing_defect);
  a(r.sum_defect);
  a(r.error_bound);
  // /chaos/solver
  a(r.solver);
  a(r.solver_converged);
  a(r.solver_iterations);
  a(r.solver_residual);
  a(r.solver_time);
  a(r.solver_ranks);
  a(r.cluster_count);
  a(r.cluster_spread);
  a(r.hist_counts);
  a(r.hist_edges);
  // /limit
  a(r.limit_lambda_max);
  a(r.limit_ks_density);
  a(r.limit_accuracy);
  a(r.limit_hist_counts);
  a(r.limit_hist_edges);
  // /bounds (format version 3: cuts per ell, lightcone_rate per ell and N)
  a(r.cuts);
  a(r.lyapunov_rate);
  a(r.hilbert_cap);
  a(r.lightcone_rate);
  a(r.ehrenfest_time);
  a(r.saturation_lyapunov);
  a(r.saturation_lightcone);
  // the diagnostics' values, one per field of the run's schema (format version 4)
  a(r.fields);
}

std::string header_bytes(const std::string& config_hash, std::int64_t total, const std::string& schema_hash) {
  Out o;
  o.bytes(kMagic, sizeof kMagic);
  o.u32(kJournalVersion);
  o.u32(static_cast<std::uint32_t>(config_hash.size()));
  o.bytes(config_hash.data(), config_hash.size());
  o.u32(static_cast<std::uint32_t>(schema_hash.size()));
  o.bytes(schema_hash.data(), schema_hash.size());
  o(total);
  const std::uint64_t h = fnv1a64_bytes(o.str().data(), o.str().size());
  o.u64(h);
  return std::move(o.str());
}

std::uint64_t le64(const char* p) {
  std::uint64_t x = 0;
  for (int i = 0; i < 8; ++i) x |= static_cast<std::uint64_t>(static_cast<unsigned char>(p[i])) << (8 * i);
  return x;
}

[[noreturn]] void fail(const std::string& what, const std::string& path, const std::string& msg) {
  throw ResultFileError(what + ": '" + path + "': " + msg);
}
[[noreturn]] void fail_errno(const std::string& what, const std::string& path, const char* call) {
  fail(what, path, std::string(call) + " failed: " + std::strerror(errno));
}

// Writes all of `b` with one write() call (retried only on EINTR before
// anything was written). Returns false with errno set on failure or a short
// write (errno = EIO then, unless set).
bool write_once(int fd, const std::string& b) {
  for (;;) {
    const ssize_t w = ::write(fd, b.data(), b.size());
    if (w < 0 && errno == EINTR) continue;
    if (w == static_cast<ssize_t>(b.size())) return true;
    if (w >= 0) errno = ENOSPC;
    return false;
  }
}

void sync_dir_of(const std::string& path) {
  std::filesystem::path dir = std::filesystem::path(path).parent_path();
  if (dir.empty()) dir = ".";
  const int d = ::open(dir.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (d >= 0) {
    ::fsync(d);  // best effort
    ::close(d);
  }
}

}  // namespace

// ---------------------------------------------------------------- public

std::string journal_path(const std::string& result_path) { return result_path + ".journal"; }

std::string encode_record(const PointRecord& r) {
  Out o;
  visit(o, r);
  return std::move(o.str());
}

bool try_decode_record(std::string_view bytes, PointRecord& out) {
  In in(bytes.data(), bytes.size());
  PointRecord r;
  visit(in, r);
  if (!in.done()) return false;
  out = std::move(r);
  return true;
}

PointRecord decode_record(std::string_view bytes) {
  PointRecord r;
  if (!try_decode_record(bytes, r))
    throw ResultFileError("decode_record: " + std::to_string(bytes.size()) +
                          " bytes are not one encoded PointRecord (format version " +
                          std::to_string(kJournalVersion) + ")");
  return r;
}

JournalContents read_journal(const std::string& path) {
  const std::string what = "read_journal";
  std::ifstream f(path, std::ios::binary);
  if (!f) fail_errno(what, path, "open");
  std::error_code ec;
  const std::uint64_t size = std::filesystem::file_size(path, ec);
  if (ec) fail(what, path, "cannot get its size: " + ec.message());

  JournalContents c;
  // ---- header
  char fixed[16];
  if (size < sizeof fixed || !f.read(fixed, sizeof fixed))
    fail(what, path, "not a toral journal (truncated header, " + std::to_string(size) + " bytes)");
  if (std::memcmp(fixed, kMagic, sizeof kMagic) != 0) fail(what, path, "not a toral journal (bad magic)");
  In h(fixed + 8, 8);
  c.version = h.u32();
  const std::uint32_t n = h.u32();
  if (c.version != kJournalVersion)
    fail(what, path, "unsupported journal format version " + std::to_string(c.version) +
                         " (this toral reads version " + std::to_string(kJournalVersion) + ")");
  if (n > kMaxHashBytes) fail(what, path, "bad journal header (config hash of " + std::to_string(n) + " bytes)");
  if (size < sizeof fixed + n + 4) fail(what, path, "bad journal header (truncated)");
  std::string rest(n + 4, '\0');
  if (!f.read(rest.data(), static_cast<std::streamsize>(rest.size())))
    fail(what, path, "bad journal header (read failed)");
  std::uint32_t m = 0;
  for (int i = 0; i < 4; ++i) m |= static_cast<std::uint32_t>(static_cast<unsigned char>(rest[n + i])) << (8 * i);
  if (m > kMaxHashBytes) fail(what, path, "bad journal header (schema hash of " + std::to_string(m) + " bytes)");
  const std::uint64_t hsize = sizeof fixed + n + 4 + m + 16;
  if (size < hsize) fail(what, path, "bad journal header (truncated)");
  rest.resize(n + 4 + m + 16);
  if (!f.read(rest.data() + n + 4, static_cast<std::streamsize>(m + 16)))
    fail(what, path, "bad journal header (read failed)");
  {
    std::string all(fixed, sizeof fixed);
    all += rest.substr(0, n + 4 + m + 8);
    if (fnv1a64_bytes(all.data(), all.size()) != le64(rest.data() + n + 4 + m + 8))
      fail(what, path, "bad journal header (checksum mismatch)");
  }
  c.config_hash = rest.substr(0, n);
  c.schema_hash = rest.substr(n + 4, m);
  c.total_points = static_cast<std::int64_t>(le64(rest.data() + n + 4 + m));
  c.header_bytes = c.valid_bytes = hsize;

  // ---- frames
  std::string payload;
  for (;;) {
    const std::uint64_t pos = c.valid_bytes, left = size - pos;
    if (left == 0) break;
    auto stop = [&](JournalTail t, const std::string& why) {
      c.tail = t;
      c.tail_reason = "frame at byte " + std::to_string(pos) + ": " + why;
    };
    char lenb[8];
    if (left < 8) {
      stop(JournalTail::Torn, "incomplete length (" + std::to_string(left) + " bytes left)");
      break;
    }
    if (!f.read(lenb, 8)) fail(what, path, "read failed at byte " + std::to_string(pos));
    const std::uint64_t len = le64(lenb);
    if (len > left - 8 || left - 8 - len < 8) {
      stop(JournalTail::Torn, "payload of " + std::to_string(len) + " bytes runs past the end (" +
                                  std::to_string(left) + " bytes left)");
      break;
    }
    payload.resize(static_cast<std::size_t>(len));
    char sumb[8];
    if (!f.read(payload.data(), static_cast<std::streamsize>(len)) || !f.read(sumb, 8))
      fail(what, path, "read failed at byte " + std::to_string(pos));
    if (fnv1a64_bytes(payload.data(), payload.size()) != le64(sumb)) {
      stop(JournalTail::Corrupt, "checksum mismatch");
      break;
    }
    PointRecord r;
    if (!try_decode_record(payload, r)) {
      stop(JournalTail::Corrupt,
           "payload does not parse as a version-" + std::to_string(kJournalVersion) + " record");
      break;
    }
    c.records.push_back(std::move(r));
    c.valid_bytes = pos + kFrameOverhead + len;
  }
  c.dropped_bytes = size - c.valid_bytes;
  return c;
}

// ---------------------------------------------------------------- JournalWriter

JournalWriter::~JournalWriter() { reset(); }

JournalWriter::JournalWriter(JournalWriter&& o) noexcept
    : fd_(std::exchange(o.fd_, -1)), path_(std::move(o.path_)), size_(std::exchange(o.size_, 0)) {}

JournalWriter& JournalWriter::operator=(JournalWriter&& o) noexcept {
  if (this != &o) {
    reset();
    fd_ = std::exchange(o.fd_, -1);
    path_ = std::move(o.path_);
    size_ = std::exchange(o.size_, 0);
  }
  return *this;
}

void JournalWriter::reset() noexcept {
  if (fd_ >= 0) ::close(fd_);
  fd_ = -1;
}

void JournalWriter::open_new(const std::string& path, const std::string& config_hash,
                             std::int64_t total_points, const std::string& schema_hash) {
  const std::string what = "journal open_new";
  if (config_hash.size() > kMaxHashBytes) fail(what, path, "config hash longer than 4096 bytes");
  if (schema_hash.size() > kMaxHashBytes) fail(what, path, "schema hash longer than 4096 bytes");
  reset();
  // The header goes to a sibling temporary that replaces `path` atomically:
  // a crash leaves either the old file or a journal with a whole header.
  const std::string tmp = atomic_file::temp_name(path, "new");
  const int fd = ::open(tmp.c_str(), O_WRONLY | O_CREAT | O_EXCL | O_APPEND | O_CLOEXEC, 0644);
  if (fd < 0) fail_errno(what, tmp, "open");
  const std::string h = header_bytes(config_hash, total_points, schema_hash);
  if (!write_once(fd, h) || ::fdatasync(fd) != 0) {
    const int e = errno;
    ::close(fd);
    ::unlink(tmp.c_str());
    errno = e;
    fail_errno(what, tmp, "writing the header");
  }
  if (!atomic_file::replace(tmp, path)) {
    const int e = errno;
    ::close(fd);
    ::unlink(tmp.c_str());
    errno = e;
    fail_errno(what, path, "rename");
  }
  sync_dir_of(path);
  fd_ = fd;
  path_ = path;
  size_ = h.size();
}

JournalContents JournalWriter::open_append(const std::string& path) {
  const std::string what = "journal open_append";
  reset();
  JournalContents c = read_journal(path);
  const int fd = ::open(path.c_str(), O_WRONLY | O_APPEND | O_CLOEXEC);
  if (fd < 0) fail_errno(what, path, "open");
  if (c.dropped_bytes > 0) {
    if (::ftruncate(fd, static_cast<off_t>(c.valid_bytes)) != 0 || ::fdatasync(fd) != 0) {
      const int e = errno;
      ::close(fd);
      errno = e;
      fail_errno(what, path, "cutting the torn tail");
    }
  }
  fd_ = fd;
  path_ = path;
  size_ = c.valid_bytes;
  return c;
}

void JournalWriter::append(const PointRecord& r) {
  if (fd_ < 0) throw ResultFileError("journal append: no journal is open");
  Out o;
  o.u64(0);  // length, filled in below
  visit(o, r);
  std::string& b = o.str();
  const std::uint64_t len = b.size() - 8;
  for (int i = 0; i < 8; ++i) b[static_cast<std::size_t>(i)] = static_cast<char>((len >> (8 * i)) & 0xff);
  const std::uint64_t sum = fnv1a64_bytes(b.data() + 8, static_cast<std::size_t>(len));
  o.u64(sum);
  if (!write_once(fd_, b)) {
    const int e = errno;
    // Cut a partial frame off so that later frames stay readable.
    const bool cut = ::ftruncate(fd_, static_cast<off_t>(size_)) == 0;
    errno = e;
    fail_errno("journal append", path_,
               cut ? "write (the partial frame was removed)" : "write (a partial frame remains)");
  }
  size_ += b.size();
}

void JournalWriter::sync() {
  if (fd_ < 0) throw ResultFileError("journal sync: no journal is open");
  if (::fdatasync(fd_) != 0) fail_errno("journal sync", path_, "fdatasync");
}

void JournalWriter::close() {
  if (fd_ < 0) return;
  const int fd = std::exchange(fd_, -1);
  if (::close(fd) != 0) fail_errno("journal close", path_, "close");
}

}  // namespace toral
