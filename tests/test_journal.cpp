// Tests of the resume journal (io/journal.hpp): bit-exact round trips, torn
// tails at every byte, corrupt frames and headers, append after a crash.
#include <gtest/gtest.h>
#include <unistd.h>

#include <bit>
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <iterator>
#include <limits>
#include <sstream>
#include <string>
#include <vector>

#include "record_expect.hpp"
#include "journal.hpp"

namespace fs = std::filesystem;
using namespace toral;

namespace {

class Scratch {
 public:
  Scratch() {
    const char* base = std::getenv("TMPDIR");
    std::string tmpl = std::string(base && *base ? base : "/tmp") + "/toral_test_journal.XXXXXX";
    std::vector<char> buf(tmpl.begin(), tmpl.end());
    buf.push_back('\0');
    if (!mkdtemp(buf.data())) std::abort();
    dir_ = buf.data();
  }
  ~Scratch() {
    std::error_code ec;
    if (!std::getenv("TORAL_TEST_KEEP")) fs::remove_all(dir_, ec);
  }
  std::string path(const std::string& name) const { return dir_ + "/" + name; }

 private:
  std::string dir_;
};

Scratch& scratch() {
  static Scratch s;
  return s;
}

std::string slurp(const std::string& p) {
  std::ifstream in(p, std::ios::binary);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}
void spit(const std::string& p, const std::string& bytes) {
  std::ofstream o(p, std::ios::binary | std::ios::trunc);
  o.write(bytes.data(), static_cast<std::streamsize>(bytes.size()));
}

using toral_test::bits;


// Awkward doubles: NaNs with payloads and signs, infinities, signed zeros,
// denormals, extremes.
double special(std::uint64_t k) {
  static const double v[] = {
      std::numeric_limits<double>::quiet_NaN(),
      -std::numeric_limits<double>::quiet_NaN(),
      std::bit_cast<double>(std::uint64_t{0x7ff8000000000123}),  // NaN with a payload
      std::bit_cast<double>(std::uint64_t{0x7ff0000000000001}),  // signalling-NaN bits
      std::numeric_limits<double>::infinity(),
      -std::numeric_limits<double>::infinity(),
      0.0,
      -0.0,
      std::numeric_limits<double>::denorm_min(),
      -std::numeric_limits<double>::max(),
      std::numeric_limits<double>::min(),
      1.0 / 3.0,
  };
  return v[k % (sizeof v / sizeof v[0])];
}

std::vector<double> vec(std::uint64_t seed, std::size_t n) {
  std::vector<double> out;
  for (std::size_t i = 0; i < n; ++i)
    out.push_back((seed + i) % 3 == 0 ? special(seed * 7 + i) : 0.001 * static_cast<double>(seed) - static_cast<double>(i));
  return out;
}

// Record i: every field set, sizes varying with i (many vectors empty for
// some i), some long messages with NULs and invalid UTF-8.
PointRecord make_record(std::int64_t i) {
  const auto u = static_cast<std::uint64_t>(i);
  PointRecord r;
  r.index = i * 3 + 1;
  r.row = i % 5 == 0 ? -1 : i;
  for (std::uint64_t p = 0; p < u % 5; ++p)
    r.params.push_back(p == 0 ? std::numeric_limits<std::int64_t>::min() : static_cast<std::int64_t>(p * 1000003 + u));
  r.status = static_cast<std::int32_t>(i % 7);
  if (i % 4 == 1) {
    r.message = "point " + std::to_string(i) + " failed: na\xc3\xafve";
  } else if (i % 4 == 2) {
    r.message.assign(70000 + u, 'x');
    r.message[5] = '\0';
    r.message[77] = '\xff';
  }
  r.method = static_cast<std::int32_t>(-(i % 3));
  r.wall_time = special(u);
  r.lambda_max = special(u + 1);
  r.ks_rate = 1e300 * static_cast<double>(i);
  r.ks_density = -static_cast<double>(i) / 7.0;
  r.unstable_count = i % 2 ? std::numeric_limits<std::int64_t>::max() : -1;
  r.zero_count = i % 2 ? -1 : std::numeric_limits<std::int64_t>::min();
  r.zero_certified = static_cast<std::int64_t>(i % 3) - 1;
  r.exponents = vec(u, u % 9);
  if (i % 3) r.exponent_errors = vec(u + 5, r.exponents.size());
  r.pairing_defect = special(u + 2);
  r.sum_defect = special(u + 3);
  r.error_bound = special(u + 4);
  r.solver = static_cast<std::int32_t>(i % 6);
  r.solver_converged = i * 11;
  r.solver_iterations = -i;
  r.solver_residual = special(u + 5);
  r.solver_time = 0.5 * static_cast<double>(i);
  r.solver_ranks = 1 + i % 4;
  r.cluster_count = i % 3 - 1;
  r.cluster_spread = special(u + 6);
  r.hist_counts = vec(u + 1, (u % 4) * 2);
  r.hist_edges = vec(u + 2, u % 4 ? (u % 4) * 2 + 1 : 0);
  r.limit_lambda_max = special(u + 7);
  r.limit_ks_density = special(u + 8);
  r.limit_accuracy = special(u + 9);
  r.limit_hist_counts = vec(u + 3, u % 2 ? 4 : 0);
  r.limit_hist_edges = vec(u + 4, u % 2 ? 5 : 0);
  for (std::size_t l = 0; l < u % 3; ++l) r.cuts.push_back(l % 2 ? -1 : static_cast<std::int64_t>(2 - i % 3));
  r.lyapunov_rate = vec(u + 6, u % 3);
  r.hilbert_cap = vec(u + 7, (u % 3) * 2);
  r.lightcone_rate = vec(u + 8, (u % 3) * 2);
  r.ehrenfest_time = vec(u + 9, i % 2 ? 2 : 0);
  r.saturation_lyapunov = vec(u + 10, (u % 3) * 2);
  r.saturation_lightcone = vec(u + 11, (u % 3) * 2);
  // the diagnostics' values: absent for some records, else fields of
  // assorted shapes (scalars, ragged, empty ones) with awkward values
  if (i % 4 != 3) {
    const std::size_t nr = 1 + u % 3, nt = 2 + u % 5, nn = u % 3;
    FieldValue w;
    w.f = {special(u + 12)};
    r.fields.push_back(w);
    FieldValue cuts;
    cuts.shape = {static_cast<std::int64_t>(nr)};
    for (std::size_t k = 0; k < nr; ++k) cuts.i.push_back(k % 2 ? -1 : static_cast<std::int64_t>(k + u));
    r.fields.push_back(cuts);
    FieldValue ent;
    ent.shape = {static_cast<std::int64_t>(nr), static_cast<std::int64_t>(nt)};
    ent.f = vec(u + 14, nr * nt);
    r.fields.push_back(ent);
    r.fields.push_back(FieldValue{});  // not computed
    FieldValue stab;
    stab.shape = {static_cast<std::int64_t>(nn), static_cast<std::int64_t>(nr), static_cast<std::int64_t>(nt)};
    stab.f = vec(u + 20, nn * nr * nt);
    r.fields.push_back(stab);
    FieldValue viol;
    viol.shape = {static_cast<std::int64_t>(nn), static_cast<std::int64_t>(nr)};
    viol.i.assign(nn * nr, static_cast<std::int64_t>(i % 2));
    r.fields.push_back(viol);
  }
  return r;
}

// Writes records 0..n-1 into a new journal; returns the file size after
// each append (sizes[0] = header only).
std::vector<std::uint64_t> write_journal(const std::string& p, std::int64_t n,
                                         const std::string& hash = "0123456789abcdef",
                                         std::int64_t total = 1000) {
  JournalWriter w;
  w.open_new(p, hash, total);
  std::vector<std::uint64_t> sizes{w.size()};
  for (std::int64_t i = 0; i < n; ++i) {
    w.append(make_record(i));
    sizes.push_back(w.size());
  }
  w.sync();
  w.close();
  return sizes;
}

void expect_one_line_naming(const std::string& msg, const std::string& path) {
  EXPECT_EQ(msg.find('\n'), std::string::npos) << msg;
  EXPECT_NE(msg.find(path), std::string::npos) << msg;
}

}  // namespace

TEST(Journal, PathNextToResultFile) {
  EXPECT_EQ(journal_path("/data/run.h5"), "/data/run.h5.journal");
  EXPECT_EQ(journal_path("run.h5"), "run.h5.journal");
}

TEST(Journal, RoundTripManyRecordsBitExact) {
  const std::string p = scratch().path("many.journal");
  const std::int64_t n = 300;
  const auto sizes = write_journal(p, n, "af63bd4c8601b7df", 123456789);
  EXPECT_EQ(fs::file_size(p), sizes.back());
  const JournalContents c = read_journal(p);
  EXPECT_EQ(c.version, kJournalVersion);
  EXPECT_EQ(c.config_hash, "af63bd4c8601b7df");
  EXPECT_EQ(c.total_points, 123456789);
  EXPECT_EQ(c.header_bytes, sizes[0]);
  EXPECT_EQ(c.tail, JournalTail::Clean);
  EXPECT_TRUE(c.tail_reason.empty());
  EXPECT_EQ(c.dropped_bytes, 0u);
  EXPECT_EQ(c.valid_bytes, sizes.back());
  ASSERT_EQ(c.records.size(), static_cast<std::size_t>(n));
  for (std::int64_t i = 0; i < n; ++i)
    toral_test::expect_identical_records(c.records[static_cast<std::size_t>(i)], make_record(i), "record " + std::to_string(i));
  // frame sizes are payload + 16
  for (std::int64_t i = 0; i < n; ++i)
    EXPECT_EQ(sizes[static_cast<std::size_t>(i) + 1] - sizes[static_cast<std::size_t>(i)],
              encode_record(make_record(i)).size() + 16);
}

TEST(Journal, SchemaHashInTheHeader) {
  const std::string p = scratch().path("schema.journal");
  {
    JournalWriter w;
    w.open_new(p, "0123456789abcdef", 9, "fedcba9876543210");
    w.append(make_record(1));
    w.close();
  }
  const auto c = read_journal(p);
  EXPECT_EQ(c.config_hash, "0123456789abcdef");
  EXPECT_EQ(c.schema_hash, "fedcba9876543210");
  EXPECT_EQ(c.total_points, 9);
  ASSERT_EQ(c.records.size(), 1u);
  toral_test::expect_identical_records(c.records[0], make_record(1), "record 1");
  // a flipped byte of the schema hash breaks the header checksum
  std::string b;
  {
    std::ifstream in(p, std::ios::binary);
    b.assign(std::istreambuf_iterator<char>(in), {});
  }
  b[16 + 16 + 4 + 3] ^= 0x01;
  {
    std::ofstream out(p, std::ios::binary | std::ios::trunc);
    out << b;
  }
  try {
    read_journal(p);
    ADD_FAILURE() << "a damaged schema hash was accepted";
  } catch (const ResultFileError& e) {
    EXPECT_NE(std::string(e.what()).find("checksum"), std::string::npos) << e.what();
  }
}

TEST(Journal, DefaultRecordAndEmptyHash) {
  const std::string p = scratch().path("default.journal");
  {
    JournalWriter w;
    w.open_new(p, "", 0);
    w.append(PointRecord{});
    w.close();
  }
  const auto c = read_journal(p);
  EXPECT_EQ(c.config_hash, "");
  EXPECT_EQ(c.total_points, 0);
  ASSERT_EQ(c.records.size(), 1u);
  toral_test::expect_identical_records(c.records[0], PointRecord{}, "default record");
  EXPECT_TRUE(std::isnan(c.records[0].lambda_max));
}

TEST(Journal, SerializeParseRejectsExtraOrMissingBytes) {
  const PointRecord r = make_record(7);
  const std::string b = encode_record(r);
  toral_test::expect_identical_records(decode_record(b), r, "decoded");
  PointRecord out;
  ASSERT_TRUE(try_decode_record(b, out));
  toral_test::expect_identical_records(out, r, "try_decoded");
  EXPECT_FALSE(try_decode_record(b + "x", out));
  EXPECT_FALSE(try_decode_record(b.substr(0, b.size() - 1), out));
  EXPECT_FALSE(try_decode_record(std::string(), out));
  EXPECT_THROW(decode_record(b + "x"), ResultFileError);
  EXPECT_THROW(decode_record(std::string()), ResultFileError);
  // a vector length far beyond the payload is refused without allocating it
  std::string huge = b;
  std::memset(huge.data() + 16, 0xff, 8);  // params count
  EXPECT_FALSE(try_decode_record(huge, out));
}

// Cutting the file anywhere inside the last frame leaves the other records
// intact and reports the cut frame as torn.
TEST(Journal, TornTailAtEveryByteOfLastFrame) {
  const std::string p = scratch().path("torn_src.journal"), q = scratch().path("torn.journal");
  const std::int64_t n = 6;
  const auto sizes = write_journal(p, n);
  const std::string full = slurp(p);
  const std::uint64_t last = sizes[static_cast<std::size_t>(n) - 1], end = sizes.back();
  ASSERT_EQ(full.size(), end);
  ASSERT_GT(end - last, 100u);
  for (std::uint64_t cut = last; cut < end; ++cut) {
    spit(q, full.substr(0, cut));
    const JournalContents c = read_journal(q);
    ASSERT_EQ(c.records.size(), static_cast<std::size_t>(n - 1)) << "cut at " << cut;
    EXPECT_EQ(c.valid_bytes, last) << cut;
    EXPECT_EQ(c.dropped_bytes, cut - last) << cut;
    EXPECT_EQ(c.tail, cut == last ? JournalTail::Clean : JournalTail::Torn) << cut;
    if (cut > last) {
      EXPECT_FALSE(c.tail_reason.empty());
    }
    if (cut == last || cut == end - 1 || cut % 16 == 0) {
      for (std::int64_t i = 0; i + 1 < n; ++i)
        toral_test::expect_identical_records(c.records[static_cast<std::size_t>(i)], make_record(i),
                         "cut " + std::to_string(cut) + " record " + std::to_string(i));
    }
  }
  // the intact file for comparison
  EXPECT_EQ(read_journal(p).records.size(), static_cast<std::size_t>(n));
}

TEST(Journal, TruncatedHeaderIsAnError) {
  const std::string p = scratch().path("hdr_src.journal"), q = scratch().path("hdr.journal");
  const auto sizes = write_journal(p, 1);
  const std::string full = slurp(p);
  for (std::uint64_t cut = 0; cut < sizes[0]; ++cut) {
    spit(q, full.substr(0, cut));
    try {
      read_journal(q);
      ADD_FAILURE() << "no exception for a header cut at " << cut;
    } catch (const ResultFileError& e) {
      expect_one_line_naming(e.what(), q);
    }
  }
  spit(q, full.substr(0, sizes[0]));  // a whole header and nothing else is fine
  const auto c = read_journal(q);
  EXPECT_TRUE(c.records.empty());
  EXPECT_EQ(c.tail, JournalTail::Clean);
}

TEST(Journal, CorruptChecksumIsDetected) {
  const std::string p = scratch().path("sum_src.journal"), q = scratch().path("sum.journal");
  const std::int64_t n = 4;
  const auto sizes = write_journal(p, n);
  const std::string full = slurp(p);
  // a flipped bit in the checksum of the last frame
  {
    std::string b = full;
    b[b.size() - 3] ^= 0x10;
    spit(q, b);
    const auto c = read_journal(q);
    EXPECT_EQ(c.records.size(), static_cast<std::size_t>(n - 1));
    EXPECT_EQ(c.tail, JournalTail::Corrupt);
    EXPECT_NE(c.tail_reason.find("checksum"), std::string::npos) << c.tail_reason;
    EXPECT_EQ(c.dropped_bytes, sizes[4] - sizes[3]);
  }
  // a flipped byte in the payload of frame 1: reading stops there, even
  // though frames 2 and 3 are intact
  {
    std::string b = full;
    b[static_cast<std::size_t>(sizes[1]) + 20] ^= 0x01;
    spit(q, b);
    const auto c = read_journal(q);
    ASSERT_EQ(c.records.size(), 1u);
    toral_test::expect_identical_records(c.records[0], make_record(0), "record 0");
    EXPECT_EQ(c.tail, JournalTail::Corrupt);
    EXPECT_EQ(c.valid_bytes, sizes[1]);
    EXPECT_EQ(c.dropped_bytes, sizes[4] - sizes[1]);
  }
  // a zero-filled tail (a crash that extended the file without its data)
  {
    spit(q, full + std::string(200, '\0'));
    const auto c = read_journal(q);
    EXPECT_EQ(c.records.size(), static_cast<std::size_t>(n));
    EXPECT_NE(c.tail, JournalTail::Clean);
    EXPECT_EQ(c.dropped_bytes, 200u);
  }
  // a frame with a valid checksum whose payload is not a record
  {
    std::string frame(8, '\0');
    frame[0] = 3;
    frame += "abc";
    const std::uint64_t h = fnv1a64_bytes("abc", 3);
    for (int i = 0; i < 8; ++i) frame.push_back(static_cast<char>((h >> (8 * i)) & 0xff));
    spit(q, full + frame);
    const auto c = read_journal(q);
    EXPECT_EQ(c.records.size(), static_cast<std::size_t>(n));
    EXPECT_EQ(c.tail, JournalTail::Corrupt);
    EXPECT_NE(c.tail_reason.find("parse"), std::string::npos) << c.tail_reason;
    EXPECT_EQ(c.dropped_bytes, frame.size());
  }
}

TEST(Journal, BadHeadersAreErrors) {
  const std::string p = scratch().path("bad_src.journal"), q = scratch().path("bad.journal");
  write_journal(p, 2);
  const std::string full = slurp(p);
  auto expect_error = [&](const std::string& bytes, const std::string& needle) {
    spit(q, bytes);
    try {
      read_journal(q);
      ADD_FAILURE() << "no exception for " << needle;
    } catch (const ResultFileError& e) {
      expect_one_line_naming(e.what(), q);
      EXPECT_NE(std::string(e.what()).find(needle), std::string::npos) << e.what();
    }
  };
  {
    std::string b = full;
    b[0] = 'X';
    expect_error(b, "bad magic");
  }
  {
    std::string b = full;
    b[8] = static_cast<char>(kJournalVersion + 1);  // a later version
    expect_error(b, "unsupported journal format version " + std::to_string(kJournalVersion + 1));
  }
  for (const char old : {1, 2, 3}) {
    // journals of the previous formats (1: before /entanglement; 2: before the
    // exact zero count, the region rate and the per-ell cuts; 3: before the
    // declared diagnostics' fields and the schema hash) are refused by name
    std::string b = full;
    b[8] = old;
    expect_error(b, "unsupported journal format version " + std::to_string(old) + " (this toral reads version 4)");
  }
  {
    std::string b = full;
    b[17] ^= 0x20;  // a byte of the config hash
    expect_error(b, "checksum");
  }
  expect_error("this is not a journal at all, just text\n", "not a toral journal");
  try {
    read_journal(scratch().path("missing.journal"));
    ADD_FAILURE() << "no exception for a missing file";
  } catch (const ResultFileError& e) {
    expect_one_line_naming(e.what(), scratch().path("missing.journal"));
  }
}

TEST(Journal, OpenAppendCutsTornTailAndContinues) {
  const std::string p = scratch().path("append.journal");
  const std::int64_t n = 5;
  const auto sizes = write_journal(p, n, "feedface", 77);
  // a crash in the middle of the last frame
  const std::uint64_t cut = (sizes[4] + sizes[5]) / 2;
  fs::resize_file(p, cut);
  {
    JournalWriter w;
    const JournalContents c = w.open_append(p);
    EXPECT_EQ(c.config_hash, "feedface");
    EXPECT_EQ(c.total_points, 77);
    EXPECT_EQ(c.records.size(), 4u);
    EXPECT_EQ(c.tail, JournalTail::Torn);
    EXPECT_EQ(c.dropped_bytes, cut - sizes[4]);
    EXPECT_EQ(fs::file_size(p), sizes[4]);  // cut off before anything is appended
    EXPECT_EQ(w.size(), sizes[4]);
    w.append(make_record(100));
    w.append(make_record(101));
    w.sync();
    w.close();
  }
  auto c = read_journal(p);
  EXPECT_EQ(c.tail, JournalTail::Clean);
  ASSERT_EQ(c.records.size(), 6u);
  for (int i = 0; i < 4; ++i) toral_test::expect_identical_records(c.records[static_cast<std::size_t>(i)], make_record(i), "old");
  toral_test::expect_identical_records(c.records[4], make_record(100), "new 100");
  toral_test::expect_identical_records(c.records[5], make_record(101), "new 101");
  // a clean journal is appended to unchanged
  {
    JournalWriter w;
    const auto c2 = w.open_append(p);
    EXPECT_EQ(c2.dropped_bytes, 0u);
    EXPECT_EQ(c2.records.size(), 6u);
    w.append(make_record(102));
  }  // destructor closes
  c = read_journal(p);
  ASSERT_EQ(c.records.size(), 7u);
  toral_test::expect_identical_records(c.records[6], make_record(102), "new 102");
  // after a corrupt frame the rest is dropped too
  {
    std::string b = slurp(p);
    b[static_cast<std::size_t>(sizes[2]) + 30] ^= 0x40;
    spit(p, b);
    JournalWriter w;
    const auto c3 = w.open_append(p);
    EXPECT_EQ(c3.tail, JournalTail::Corrupt);
    EXPECT_EQ(c3.records.size(), 2u);
    EXPECT_EQ(fs::file_size(p), sizes[2]);
    w.append(make_record(103));
  }
  c = read_journal(p);
  ASSERT_EQ(c.records.size(), 3u);
  toral_test::expect_identical_records(c.records[2], make_record(103), "new 103");
}

TEST(Journal, OpenNewReplacesAndMoves) {
  const std::string p = scratch().path("replace.journal");
  write_journal(p, 3);
  JournalWriter w;
  w.open_new(p, "other", 5);
  EXPECT_TRUE(w.is_open());
  EXPECT_EQ(w.path(), p);
  JournalWriter moved = std::move(w);
  EXPECT_FALSE(w.is_open());
  EXPECT_TRUE(moved.is_open());
  moved.append(make_record(9));
  moved.close();
  EXPECT_FALSE(moved.is_open());
  const auto c = read_journal(p);
  EXPECT_EQ(c.config_hash, "other");
  EXPECT_EQ(c.total_points, 5);
  ASSERT_EQ(c.records.size(), 1u);
  toral_test::expect_identical_records(c.records[0], make_record(9), "record 9");
  // no temporaries left next to it
  for (const auto& e : fs::directory_iterator(fs::path(p).parent_path()))
    EXPECT_EQ(e.path().filename().string().find(".new."), std::string::npos) << e.path();
  EXPECT_THROW(moved.append(make_record(1)), ResultFileError);
  EXPECT_THROW(JournalWriter().open_append(scratch().path("nope.journal")), ResultFileError);
}

TEST(Journal, ConfigHashHelper) {
  EXPECT_EQ(config_hash_of(""), "cbf29ce484222325");  // the FNV-1a-64 offset basis
  EXPECT_EQ(config_hash_of("a"), "af63dc4c8601ec8c");
  EXPECT_EQ(config_hash_of("foobar"), "85944171f73967e8");
}
