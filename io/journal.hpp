// The resume journal: an append-only binary log of finished points, kept next
// to the result file (journal_path). A run appends every PointRecord as soon
// as it is computed; after a crash the records are read back and only the
// missing points are recomputed. The format is internal and versioned
// (docs/layout.md, "The resume journal"); it is not a contract for users.
//
//   header: "TORALJNL" | u32 format version | u32 n | n bytes config hash |
//           u32 m | m bytes schema hash | i64 total points |
//           u64 FNV-1a-64 of all header bytes before it
//   frame:  u64 payload length | payload | u64 FNV-1a-64 of the payload
//
// All integers are little-endian; doubles are stored as their raw IEEE-754
// bits (NaN payloads and signs survive). The payload is every field of
// PointRecord in declaration order (encode_record; journal.cpp, visit()).
//
// Not collective and not thread-safe: one JournalWriter per journal file.
#pragma once
#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

#include "common.hpp"
#include "record.hpp"

namespace toral {

// Format version written in the header; read_journal refuses others.
// 2: the /entanglement fields of PointRecord were added.
// 3: /chaos/zero_count and /chaos/zero_certified; /bounds cuts per ell and
//    lightcone_rate per ell and N; the region rate (ent_region_rate,
//    gauss_slope_over_region_rate).
// 4: the diagnostics' values as one list of (shape, float values, integer
//    values) per declared field (PointRecord::fields); the header carries
//    the schema hash.
constexpr std::uint32_t kJournalVersion = 4;

// `result_path + ".journal"`.
std::string journal_path(const std::string& result_path);

struct JournalHeader {
  std::uint32_t version = kJournalVersion;
  std::string config_hash;        // RunMeta::config_hash of the run
  std::string schema_hash;        // Schema::hash() of the run's diagnostics ("" when none)
  std::int64_t total_points = 0;  // points of the whole run
};

// How the journal ends.
enum class JournalTail {
  Clean,     // the last frame ends exactly at the end of the file
  Torn,      // a frame runs past the end of the file (a crash mid-append)
  Corrupt,   // a complete frame whose checksum does not match, or whose
             // payload does not parse
};

// The header fields (version, config_hash, total_points) are members.
struct JournalContents : JournalHeader {
  std::vector<PointRecord> records;  // the intact frames, in file order
  std::uint64_t header_bytes = 0;    // size of the header
  std::uint64_t valid_bytes = 0;     // end of the last intact frame (>= header_bytes)
  std::uint64_t dropped_bytes = 0;   // file size - valid_bytes
  JournalTail tail = JournalTail::Clean;
  std::string tail_reason;           // one line; empty when Clean
};

// Reads a journal. Stops at the first torn or corrupt frame and reports how
// many bytes were dropped. Throws ResultFileError (one line, naming the
// file) when the file cannot be read or the header is bad (wrong magic,
// unsupported version, bad header checksum, truncated header).
JournalContents read_journal(const std::string& path);

class JournalWriter {
 public:
  JournalWriter() = default;
  ~JournalWriter();  // closes (no sync)
  JournalWriter(JournalWriter&& o) noexcept;
  JournalWriter& operator=(JournalWriter&& o) noexcept;
  JournalWriter(const JournalWriter&) = delete;
  JournalWriter& operator=(const JournalWriter&) = delete;

  // Creates `path` (replacing an existing file) and writes the header, then
  // fdatasync()s it so that a journal either has a whole header or none.
  void open_new(const std::string& path, const std::string& config_hash, std::int64_t total_points,
                const std::string& schema_hash = {});
  // Opens an existing journal for appending: reads it (read_journal), cuts a
  // torn or corrupt tail off (ftruncate to valid_bytes, then fdatasync), and
  // returns what it read. The caller compares header.config_hash /
  // total_points with the run before appending.
  JournalContents open_append(const std::string& path);

  // Appends one frame with a single write() (O_APPEND); no sync. If the
  // write fails or is short, the file is cut back to its previous size and
  // ResultFileError is thrown.
  void append(const PointRecord& r);
  // fdatasync(): every appended frame is on disk when it returns.
  void sync();
  // Closes (no sync); throws ResultFileError if close() fails.
  void close();

  bool is_open() const { return fd_ >= 0; }
  const std::string& path() const { return path_; }
  // Current size of the file in bytes (header + frames).
  std::uint64_t size() const { return size_; }

 private:
  void reset() noexcept;
  int fd_ = -1;
  std::string path_;
  std::uint64_t size_ = 0;
};

// The payload of one frame: every field of `r`, bit-exact. Also usable to
// ship records between ranks (same format version on both ends).
std::string encode_record(const PointRecord& r);
// Inverse of encode_record; throws ResultFileError unless `bytes` is exactly
// one encoded record.
PointRecord decode_record(std::string_view bytes);
// Non-throwing form: false (and `out` untouched) on malformed bytes.
bool try_decode_record(std::string_view bytes, PointRecord& out);

}  // namespace toral
