#pragma once
// RunJournal: what a run collects in memory until it finishes (the rows of
// per-object tables, the warnings), appended frame by frame to
// "<output>.partial-journal" so that --resume after a kill still has the
// rows and warnings of the frames already done. Each record carries a
// checksum; a record torn by the kill ends the journal. Records are written
// with write(2), unbuffered: what a killed process wrote is in the kernel's
// page cache and stays.
#include <cstdint>
#include <functional>
#include <string_view>
#include <string>
#include <vector>

namespace wavestack::pipeline {

class RunJournal {
public:
  struct Contents {
    std::vector<std::size_t> table_values; ///< values (rows × columns) kept per table
    std::vector<std::string> warnings;
  };
  /// One record as read back.
  struct Record {
    bool rows = false;   ///< table rows; otherwise a warning
    std::size_t frame = 0, table = 0;
    const double* values = nullptr; ///< rows: `count` values
    std::size_t count = 0;
    std::string_view text;          ///< warning
  };

  static std::string path_for(const std::string& output_path);

  /// Start an empty journal (truncating an old one).
  static RunJournal create(const std::string& output_path);
  /// Read the journal of an interrupted run, keep the records of output
  /// frames below `done_frames` (those the partial file marks done), rewrite
  /// the journal with just those and continue it. A missing journal is empty.
  static RunJournal resume(const std::string& output_path, std::size_t done_frames, std::size_t tables,
                           Contents& kept);

  /// Every intact record of the journal of `output_path`, in order, read a
  /// piece at a time (a journal can be longer than memory).
  static void read(const std::string& output_path, const std::function<void(const Record&)>& each);

  RunJournal(RunJournal&&) noexcept;
  RunJournal& operator=(RunJournal&&) noexcept;
  ~RunJournal();

  /// Rows of table `table` produced by output frame `frame` (already prefixed).
  void add_rows(std::size_t frame, std::size_t table, const double* values, std::size_t count);
  void add_warning(std::size_t frame, const std::string& text);
  /// Delete the journal (the run finished).
  void remove();

private:
  RunJournal(std::string path, int fd) : path_(std::move(path)), fd_(fd) {}
  void append(std::uint32_t kind, std::size_t frame, std::uint32_t table, const void* data, std::size_t bytes);
  std::string path_;
  int fd_ = -1;
  std::vector<unsigned char> buf_; ///< one record, reused
};

} // namespace wavestack::pipeline
