#include "journal.hpp"

#include "wavestack/core/error.hpp"

#include <fcntl.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <cstdio>

namespace wavestack::pipeline {
namespace {

constexpr std::uint32_t magic = 0x314A5357; // "WSJ1"
constexpr std::uint32_t kind_rows = 1, kind_warning = 2;

// Record: magic, kind, table (u32), bytes (u32), frame (u64), payload, FNV-1a of all before.
constexpr std::size_t header_bytes = 4 * 4 + 8;

std::uint32_t fnv1a(const unsigned char* p, std::size_t n) {
  std::uint32_t h = 2166136261u;
  for (std::size_t i = 0; i < n; ++i) h = (h ^ p[i]) * 16777619u;
  return h;
}

int open_journal(const std::string& path, int flags) {
  const int fd = ::open(path.c_str(), flags | O_WRONLY | O_CLOEXEC, 0644);
  if (fd < 0) fail_output("cannot write the run journal: " + std::string(std::strerror(errno)), in_file(path));
  return fd;
}

} // namespace

std::string RunJournal::path_for(const std::string& output_path) { return output_path + ".partial-journal"; }

RunJournal RunJournal::create(const std::string& output_path) {
  const std::string path = path_for(output_path);
  return RunJournal(path, open_journal(path, O_CREAT | O_TRUNC));
}

void RunJournal::read(const std::string& output_path, const std::function<void(const Record&)>& each) {
  std::ifstream in(path_for(output_path), std::ios::binary);
  if (!in) return;
  std::vector<unsigned char> buf;
  while (true) {
    buf.resize(header_bytes);
    if (!in.read(reinterpret_cast<char*>(buf.data()), header_bytes)) return;
    std::uint32_t head[4];
    std::uint64_t frame = 0;
    std::memcpy(head, buf.data(), sizeof head);
    std::memcpy(&frame, buf.data() + 16, 8);
    if (head[0] != magic) return;
    const std::size_t payload = head[3];
    buf.resize(header_bytes + payload + 4);
    if (!in.read(reinterpret_cast<char*>(buf.data() + header_bytes), static_cast<std::streamsize>(payload + 4)))
      return; // torn by the kill
    std::uint32_t sum = 0;
    std::memcpy(&sum, buf.data() + header_bytes + payload, 4);
    if (sum != fnv1a(buf.data(), header_bytes + payload)) return;
    Record r;
    r.frame = frame;
    r.table = head[2];
    const unsigned char* data = buf.data() + header_bytes;
    if (head[1] == kind_rows && payload % sizeof(double) == 0) {
      r.rows = true;
      // the payload starts 24 bytes into a vector<unsigned char>: copy to align
      thread_local std::vector<double> values;
      values.resize(payload / sizeof(double));
      std::memcpy(values.data(), data, payload);
      r.values = values.data();
      r.count = values.size();
    } else if (head[1] == kind_warning) {
      r.text = std::string_view(reinterpret_cast<const char*>(data), payload);
    } else {
      return;
    }
    each(r);
  }
}

RunJournal RunJournal::resume(const std::string& output_path, std::size_t done_frames, std::size_t tables,
                              Contents& kept) {
  kept.table_values.assign(tables, 0);
  kept.warnings.clear();
  // Keep the records of the frames done, in a new journal that replaces the old.
  const std::string path = path_for(output_path), fresh = path + ".new";
  RunJournal j(fresh, open_journal(fresh, O_CREAT | O_TRUNC));
  read(output_path, [&](const Record& r) {
    if (r.frame >= done_frames) return; // written again by this run
    if (r.rows && r.table < tables) {
      kept.table_values[r.table] += r.count;
      j.add_rows(r.frame, r.table, r.values, r.count);
    } else if (!r.rows) {
      kept.warnings.emplace_back(r.text);
      j.add_warning(r.frame, kept.warnings.back());
    }
  });
  if (std::rename(fresh.c_str(), path.c_str()) != 0)
    fail_output("cannot replace the run journal: " + std::string(std::strerror(errno)), in_file(path));
  j.path_ = path;
  return j;
}

RunJournal::RunJournal(RunJournal&& o) noexcept : path_(std::move(o.path_)), fd_(o.fd_), buf_(std::move(o.buf_)) {
  o.fd_ = -1;
}
RunJournal& RunJournal::operator=(RunJournal&& o) noexcept {
  if (this != &o) {
    if (fd_ >= 0) ::close(fd_);
    path_ = std::move(o.path_);
    fd_ = o.fd_;
    buf_ = std::move(o.buf_);
    o.fd_ = -1;
  }
  return *this;
}
RunJournal::~RunJournal() {
  if (fd_ >= 0) ::close(fd_);
}

void RunJournal::append(std::uint32_t kind, std::size_t frame, std::uint32_t table, const void* data,
                        std::size_t bytes) {
  if (bytes > 0xffffffffu) fail_internal("run journal record too large", in_file(path_));
  buf_.resize(header_bytes + bytes + 4);
  const std::uint32_t head[4] = {magic, kind, table, static_cast<std::uint32_t>(bytes)};
  const std::uint64_t f = frame;
  std::memcpy(buf_.data(), head, sizeof head);
  std::memcpy(buf_.data() + 16, &f, 8);
  if (bytes) std::memcpy(buf_.data() + header_bytes, data, bytes);
  const std::uint32_t sum = fnv1a(buf_.data(), header_bytes + bytes);
  std::memcpy(buf_.data() + header_bytes + bytes, &sum, 4);
  std::size_t done = 0;
  while (done < buf_.size()) {
    const ssize_t w = ::write(fd_, buf_.data() + done, buf_.size() - done);
    if (w < 0 && errno == EINTR) continue;
    if (w <= 0)
      fail_output("cannot write the run journal: " + std::string(std::strerror(w < 0 ? errno : ENOSPC)),
                  in_file(path_));
    done += static_cast<std::size_t>(w);
  }
}

void RunJournal::add_rows(std::size_t frame, std::size_t table, const double* values, std::size_t count) {
  if (count) append(kind_rows, frame, static_cast<std::uint32_t>(table), values, count * sizeof(double));
}

void RunJournal::add_warning(std::size_t frame, const std::string& text) {
  append(kind_warning, frame, 0, text.data(), text.size());
}

void RunJournal::remove() {
  if (fd_ >= 0) ::close(fd_);
  fd_ = -1;
  std::error_code ec;
  std::filesystem::remove(path_, ec);
}

} // namespace wavestack::pipeline
