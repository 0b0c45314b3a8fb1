// Matrix files (include/freegap/matrix_file.hpp): the format by the extension, the file's bytes
// into the right parser, the HDF5 reader the program installs, and the small cache of the last
// matrices read that the job check, the trials and the limit share.
#include <fcntl.h>
#include <sys/mman.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <cctype>
#include <cerrno>
#include <complex>
#include <cstdint>
#include <cstring>
#include <list>
#include <memory>
#include <mutex>
#include <string>
#include <string_view>
#include <utility>

#include "freegap/errors.hpp"
#include "freegap/matrix_file.hpp"

namespace freegap::matrix_file {
namespace {

// The largest file read whole into memory.
constexpr std::uint64_t kMaxFileBytes = std::uint64_t{8} << 30;
// What read_shared keeps: the last two matrices, and no more than 1 GiB of entries.
constexpr std::size_t kKeptMatrices = 2;
constexpr std::uint64_t kKeptBytes = std::uint64_t{1} << 30;

std::atomic<Hdf5Reader> hdf5_reader{nullptr};

[[noreturn]] void refuse(const std::string& path, const std::string& what) {
  throw InputError("matrix file '" + path + "': " + what);
}

std::string lower(std::string text) {
  for (char& c : text) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return text;
}

// The file's status; refuses a missing file (with the system's reason), a directory and
// anything else that is not a regular file.
struct stat status_of(const std::string& path) {
  struct stat info {};
  if (::stat(path.c_str(), &info) != 0) {
    refuse(path, std::string("cannot open it (") + std::strerror(errno) +
                     "); check the path and its permissions");
  }
  if (S_ISDIR(info.st_mode)) refuse(path, "is a directory, not a file; name the file inside it");
  if (!S_ISREG(info.st_mode)) refuse(path, "is not a regular file; name a file");
  return info;
}

// Asks for transparent huge pages over the whole 4 KiB pages of a large buffer nothing has
// touched yet (advice only: the result is ignored, as where the kernel lacks them).
void advise_huge_pages(void* data, std::size_t bytes) {
  constexpr std::size_t kLarge = std::size_t{8} << 20;
  constexpr std::uintptr_t kPage = 4096;
  if (data == nullptr || bytes < kLarge) return;
  const auto begin = (reinterpret_cast<std::uintptr_t>(data) + kPage - 1) & ~(kPage - 1);
  const auto end = (reinterpret_cast<std::uintptr_t>(data) + bytes) & ~(kPage - 1);
#ifdef MADV_HUGEPAGE
  if (end > begin) (void)::madvise(reinterpret_cast<void*>(begin), end - begin, MADV_HUGEPAGE);
#endif
}

// A file's bytes: a buffer that is not zeroed first (the read fills it).
struct Bytes {
  std::unique_ptr<char[]> data;
  std::size_t size = 0;
  std::string_view view() const { return {data.get(), size}; }
};

// The whole file, at most 8 GiB.
Bytes read_bytes(const std::string& path) {
  const struct stat info = status_of(path);
  const auto size = static_cast<std::uint64_t>(info.st_size);
  if (size > kMaxFileBytes) {
    refuse(path, "is " + std::to_string(size) +
                     " bytes, more than the 8 GiB a matrix file may have");
  }
  const int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) {
    refuse(path, std::string("cannot open it (") + std::strerror(errno) +
                     "); check the path and its permissions");
  }
  Bytes bytes;
  bytes.data.reset(new char[size]);
  advise_huge_pages(bytes.data.get(), size);
  std::size_t done = 0;
  while (done < size) {
    const ssize_t got = ::read(fd, bytes.data.get() + done, size - done);
    if (got < 0 && errno == EINTR) continue;
    if (got < 0) {
      const int error = errno;
      ::close(fd);
      refuse(path, std::string("cannot read it (") + std::strerror(error) + ")");
    }
    if (got == 0) break;  // it shrank while read: what is there is parsed (and likely refused)
    done += static_cast<std::size_t>(got);
  }
  ::close(fd);
  bytes.size = done;
  return bytes;
}

// One kept matrix and what identifies the file it came from.
struct Kept {
  std::string path;
  std::string dataset;
  std::uint64_t size = 0;
  std::int64_t mtime_ns = 0;
  std::shared_ptr<const Matrix> matrix;
};

std::uint64_t bytes_of(const Matrix& m) {
  const auto entries = static_cast<std::uint64_t>(m.rows) * static_cast<std::uint64_t>(m.cols);
  return entries * (m.complex ? 16 : 8);
}

// Tiles of 32 × 32 entries: two of complex numbers (32 KiB) fit a core's first-level cache.
constexpr Eigen::Index kTile = 32;

template <class M>
M tiled_transpose(M&& m) {
  using Scalar = typename M::Scalar;
  using Tile = Eigen::Matrix<Scalar, Eigen::Dynamic, Eigen::Dynamic, 0, kTile, kTile>;
  const Eigen::Index rows = m.cols();
  const Eigen::Index cols = m.rows();
  if (rows != cols) {
    M out;
    resize_for_filling(out, rows, cols);
    for (Eigen::Index j = 0; j < cols; j += kTile) {
      const Eigen::Index bj = std::min(kTile, cols - j);
      for (Eigen::Index i = 0; i < rows; i += kTile) {
        const Eigen::Index bi = std::min(kTile, rows - i);
        out.block(i, j, bi, bj) = m.block(j, i, bj, bi).transpose();
      }
    }
    return out;
  }
  // Square: each diagonal tile transposed in place, each pair of tiles across it swapped.
  Tile tile;
  for (Eigen::Index j = 0; j < cols; j += kTile) {
    const Eigen::Index bj = std::min(kTile, cols - j);
    m.block(j, j, bj, bj).transposeInPlace();
    for (Eigen::Index i = j + bj; i < rows; i += kTile) {
      const Eigen::Index bi = std::min(kTile, rows - i);
      tile = m.block(i, j, bi, bj);
      m.block(i, j, bi, bj) = m.block(j, i, bj, bi).transpose();
      m.block(j, i, bj, bi) = tile.transpose();
    }
  }
  return std::move(m);
}

}  // namespace

void resize_for_filling(Eigen::MatrixXd& m, Eigen::Index rows, Eigen::Index cols) {
  m.resize(rows, cols);
  advise_huge_pages(m.data(), sizeof(double) * static_cast<std::size_t>(m.size()));
}

void resize_for_filling(Eigen::MatrixXcd& m, Eigen::Index rows, Eigen::Index cols) {
  m.resize(rows, cols);
  advise_huge_pages(m.data(), sizeof(std::complex<double>) * static_cast<std::size_t>(m.size()));
}

Eigen::MatrixXd from_row_major(Eigen::MatrixXd&& row_major) {
  return tiled_transpose(std::move(row_major));
}

Eigen::MatrixXcd from_row_major(Eigen::MatrixXcd&& row_major) {
  return tiled_transpose(std::move(row_major));
}

Format format_of(const std::string& path) {
  const std::size_t slash = path.find_last_of('/');
  const std::size_t dot = path.find_last_of('.');
  const bool has_dot = dot != std::string::npos && (slash == std::string::npos || dot > slash);
  const std::string extension = has_dot ? lower(path.substr(dot)) : "";
  if (extension == ".h5" || extension == ".hdf5") return Format::hdf5;
  if (extension == ".npy") return Format::npy;
  if (extension == ".mtx" || extension == ".mm") return Format::matrix_market;
  refuse(path, (extension.empty() ? std::string("has no extension")
                                  : "has the unknown extension '" + path.substr(dot) + "'") +
                   "; name it .h5 or .hdf5 (HDF5), .npy (NumPy) or .mtx or .mm (Matrix Market)");
}

const char* format_name(Format f) {
  switch (f) {
    case Format::hdf5:
      return "HDF5";
    case Format::npy:
      return "NumPy .npy";
    case Format::matrix_market:
      return "Matrix Market";
  }
  return "unknown";
}

void set_hdf5_reader(Hdf5Reader reader) { hdf5_reader.store(reader); }

Matrix read(const std::string& path, const std::string& dataset) {
  const Format format = format_of(path);
  if (format == Format::hdf5) {
    const Hdf5Reader reader = hdf5_reader.load();
    if (reader == nullptr) {
      refuse(path, "reading HDF5 needs the freegap program (no HDF5 reader is installed here)");
    }
    return reader(path, dataset);
  }
  if (!dataset.empty()) {
    refuse(path, "dataset applies to HDF5 files only; remove it (this is a " +
                     std::string(format_name(format)) + " file)");
  }
  const Bytes bytes = read_bytes(path);
  return format == Format::npy ? parse_npy(bytes.view(), path)
                               : parse_matrix_market(bytes.view(), path);
}

std::shared_ptr<const Matrix> read_shared(const std::string& path, const std::string& dataset) {
  static std::mutex mutex;
  static std::list<Kept> kept;  // the most recent first
  struct stat info {};
  if (::stat(path.c_str(), &info) != 0) return std::make_shared<const Matrix>(read(path, dataset));
  const auto size = static_cast<std::uint64_t>(info.st_size);
  const std::int64_t mtime_ns =
      static_cast<std::int64_t>(info.st_mtim.tv_sec) * 1000000000 + info.st_mtim.tv_nsec;
  // The lock is held while reading: threads that want the same file wait and share one read.
  const std::lock_guard<std::mutex> lock(mutex);
  for (auto it = kept.begin(); it != kept.end(); ++it) {
    if (it->path == path && it->dataset == dataset) {
      if (it->size == size && it->mtime_ns == mtime_ns) {
        kept.splice(kept.begin(), kept, it);
        return kept.front().matrix;
      }
      kept.erase(it);  // the file changed: its old matrix is of no use
      break;
    }
  }
  auto matrix = std::make_shared<const Matrix>(read(path, dataset));
  kept.push_front(Kept{path, dataset, size, mtime_ns, matrix});
  // Keep the newest few that fit the budget; one larger than the budget is not kept at all.
  std::uint64_t total = 0;
  std::size_t count = 0;
  for (auto it = kept.begin(); it != kept.end();) {
    total += bytes_of(*it->matrix);
    if (++count > kKeptMatrices || total > kKeptBytes) {
      total -= bytes_of(*it->matrix);
      --count;
      it = kept.erase(it);
    } else {
      ++it;
    }
  }
  return matrix;
}

}  // namespace freegap::matrix_file
