// Dense matrices read from files in three open formats: an HDF5 dataset, a NumPy .npy array and a
// Matrix Market file (coordinate or array; real, integer, pattern or complex; general, symmetric,
// hermitian or skew-symmetric). The reader knows nothing of jobs or samplers: it turns a file into
// a column-major Eigen matrix or refuses it with an InputError of the form
//   "matrix file 'PATH': <what is wrong>; <how to fix it>"
// (truncated, malformed, wrong rank, unsupported element type, an index out of range, …).
#pragma once

#include <Eigen/Dense>
#include <cstdint>
#include <memory>
#include <string>
#include <string_view>

namespace freegap::matrix_file {

enum class Format { hdf5, npy, matrix_market };

/// The format by the file name's extension: .h5, .hdf5 → hdf5; .npy → npy; .mtx, .mm →
/// matrix_market (case-insensitive). InputError naming the path and the known extensions.
Format format_of(const std::string& path);
const char* format_name(Format f);  ///< "HDF5", "NumPy .npy", "Matrix Market"

/// A matrix as read: `real` holds it when !complex, `values` when complex (the other is empty).
/// Integer and pattern files give real matrices (a pattern entry is 1).
struct Matrix {
  Eigen::Index rows = 0;
  Eigen::Index cols = 0;
  bool complex = false;
  Eigen::MatrixXd real;
  Eigen::MatrixXcd values;
};

/// Reads the whole file. `dataset` names the HDF5 dataset ("" takes the file's only dataset;
/// several or none is an error listing what is there); it must be "" for the other formats.
/// The file is checked completely: a shape that disagrees with the data, a truncated file or
/// trailing data, a non-finite entry and an entry out of range are refused.
Matrix read(const std::string& path, const std::string& dataset = "");

/// The same, shared: the last few matrices read (at most 2, and at most 1 GiB of entries) are kept,
/// keyed by path, dataset and the file's size and modification time, so that the job check, every
/// trial of a rank and the limit read a file once. Safe to call from several threads.
std::shared_ptr<const Matrix> read_shared(const std::string& path, const std::string& dataset = "");

/// HDF5 needs the HDF5 library, which only the store part links (docs/parts.toml: the
/// mathematics links neither MPI nor HDF5). The program installs the store's reader at start-up
/// (store::read_matrix_dataset); until then an HDF5 file is refused with an InputError saying so.
using Hdf5Reader = Matrix (*)(const std::string& path, const std::string& dataset);
void set_hdf5_reader(Hdf5Reader reader);

/// Parsers of the two byte formats from memory (the fuzz target's entry points; `read` uses
/// them). `name` names the source in messages.
Matrix parse_npy(std::string_view bytes, const std::string& name);
Matrix parse_matrix_market(std::string_view text, const std::string& name);

/// Resizes `m` to rows × cols for filling (its contents unspecified) and asks the kernel to back
/// a large one by transparent huge pages: a fresh 4000 × 4000 complex matrix is otherwise mapped
/// 4 KiB at a time on first touch, which took 0.65 s of a 1.1 s read on the development machine
/// (the same advice as linalg::resize_fresh, which this part may not use; docs/parts.toml).
void resize_for_filling(Eigen::MatrixXd& m, Eigen::Index rows, Eigen::Index cols);
void resize_for_filling(Eigen::MatrixXcd& m, Eigen::Index rows, Eigen::Index cols);

/// The rows × cols matrix whose entries `row_major` holds row by row, that is, stored as the
/// cols × rows column-major matrix it is given as (a C-order .npy array, an HDF5 dataset read
/// whole). Transposed in cache-sized tiles, in place when square: a plain transposed copy of a
/// 4000 × 4000 matrix takes most of a second, the tiles a tenth of that.
Eigen::MatrixXd from_row_major(Eigen::MatrixXd&& row_major);
Eigen::MatrixXcd from_row_major(Eigen::MatrixXcd&& row_major);

/// Bounds on a matrix's size, checked before anything is allocated. A Matrix Market size line
/// (or an HDF5 dataset's shape) may declare far more than its file holds: a sparse matrix may
/// legitimately be large, so the declaration alone decides how much memory the dense matrix takes.
struct Limits {
  std::int64_t max_dimension = 100000;   ///< rows and columns of a Matrix Market file, each
  std::int64_t max_entries = 400000000;  ///< rows × cols in every format (3.2 GB as real numbers)
};
/// The parsers with other bounds (the fuzz target lowers them: the same checks, reached with
/// inputs of a few bytes, without allocating gigabytes).
Matrix parse_npy(std::string_view bytes, const std::string& name, const Limits& limits);
Matrix parse_matrix_market(std::string_view text, const std::string& name, const Limits& limits);

}  // namespace freegap::matrix_file
