// A dense matrix from an HDF5 dataset (store::read_matrix_dataset, which matrix_file::read calls
// for .h5 and .hdf5 files once the program installed it): only the store links HDF5. The
// dataset is read whole with HDF5's own conversion to native doubles; HDF5 stores row-major, so
// the file's rows × cols elements fill a cols × rows column-major matrix, transposed after.
#include <hdf5.h>
#include <sys/stat.h>

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <complex>
#include <cstring>
#include <string>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/matrix_file.hpp"
#include "freegap/store.hpp"
#include "h5.hpp"

namespace freegap::store {
namespace {

using h5::Id;
using matrix_file::Matrix;

// HDF5's automatic error printing, off while a matrix is read and restored after (the
// threadsafe library keeps the setting per thread): every failure becomes a message instead.
class QuietErrors {
 public:
  QuietErrors() {
    H5Eget_auto2(H5E_DEFAULT, &function_, &data_);
    H5Eset_auto2(H5E_DEFAULT, nullptr, nullptr);
  }
  ~QuietErrors() { H5Eset_auto2(H5E_DEFAULT, function_, data_); }
  QuietErrors(const QuietErrors&) = delete;
  QuietErrors& operator=(const QuietErrors&) = delete;

 private:
  H5E_auto2_t function_ = nullptr;
  void* data_ = nullptr;
};

[[noreturn]] void refuse(const std::string& path, const std::string& what) {
  throw InputError("matrix file '" + path + "': " + what);
}

// HDF5's innermost reason for the last failure; the stack is cleared.
std::string cause() {
  std::string reason = h5::innermost_error();
  H5Eclear2(H5E_DEFAULT);
  return reason;
}

Id open_file(const std::string& path) {
  struct stat info {};
  if (::stat(path.c_str(), &info) != 0) {
    refuse(path, std::string("cannot open it (") + std::strerror(errno) +
                     "); check the path and its permissions");
  }
  if (S_ISDIR(info.st_mode)) refuse(path, "is a directory, not a file; name the file inside it");
  const hid_t id = H5Fopen(path.c_str(), H5F_ACC_RDONLY, H5P_DEFAULT);
  if (id >= 0) return Id(id, H5Fclose);
  const std::string why = cause();
  if (why.find("unable to lock") != std::string::npos) {
    refuse(path, "is open for writing in another process (HDF5: " + why +
                     "); wait for it to finish, or set HDF5_USE_FILE_LOCKING=FALSE");
  }
  refuse(path, "is not a readable HDF5 file (" + why +
                   "); check that it is an HDF5 file and that it was written completely");
}

herr_t collect_link(hid_t /*group*/, const char* name, const H5L_info_t* info, void* data) {
  // Hard and soft links only: an external link would open another file.
  if (info->type == H5L_TYPE_HARD || info->type == H5L_TYPE_SOFT) {
    static_cast<std::vector<std::string>*>(data)->emplace_back(name);
  }
  return 0;
}

// Whether `name` (a path from the root) opens as a dataset.
bool is_dataset(hid_t file, const std::string& name) {
  const hid_t object = H5Oopen(file, name.c_str(), H5P_DEFAULT);
  if (object < 0) {
    H5Eclear2(H5E_DEFAULT);
    return false;
  }
  const bool dataset = H5Iget_type(object) == H5I_DATASET;
  H5Oclose(object);
  return dataset;
}

// The names of the datasets at the root, in name order.
std::vector<std::string> root_datasets(hid_t file, const std::string& path) {
  std::vector<std::string> links;
  hsize_t at = 0;
  if (H5Literate(file, H5_INDEX_NAME, H5_ITER_INC, &at, collect_link, &links) < 0) {
    refuse(path, "cannot list its root group (HDF5: " + cause() + ")");
  }
  std::vector<std::string> out;
  for (const std::string& name : links) {
    if (is_dataset(file, name)) out.push_back(name);
  }
  return out;
}

std::string listed(const std::vector<std::string>& names) {
  constexpr std::size_t kShown = 10;
  std::string out;
  for (std::size_t k = 0; k < names.size() && k < kShown; ++k) {
    out += (k > 0 ? ", " : "") + names[k];
  }
  if (names.size() > kShown) out += ", …";
  return out;
}

// The dataset to read: the named one, or the root's only dataset when `dataset` is "".
std::pair<Id, std::string> open_matrix_dataset(hid_t file, const std::string& path,
                                               const std::string& dataset) {
  std::string name = dataset;
  if (name.empty()) {
    const auto names = root_datasets(file, path);
    if (names.empty()) {
      refuse(path, "holds no dataset at its root; name one with dataset = \"...\"");
    }
    if (names.size() > 1) {
      refuse(path, "holds " + std::to_string(names.size()) + " datasets at its root (" +
                       listed(names) + "); name one with dataset = \"" + names[0] + "\"");
    }
    name = names[0];
  }
  const hid_t object = H5Oopen(file, name.c_str(), H5P_DEFAULT);
  if (object < 0) {
    const std::string why = cause();
    const auto names = root_datasets(file, path);
    refuse(path, "has no dataset '" + name + "' (HDF5: " + why + "); " +
                     (names.empty() ? std::string("check the name")
                                    : "datasets at its root: " + listed(names)));
  }
  Id owned(object, H5Oclose);
  if (H5Iget_type(object) != H5I_DATASET) {
    refuse(path, "'" + name + "' is not a dataset (it is a group or a named type); name a "
                 "dataset, e.g. \"" + name + "/A\"");
  }
  return {std::move(owned), name};
}

// The dataset's shape, which must be 2-d with at least one row and one column.
std::pair<hsize_t, hsize_t> matrix_shape(hid_t dataset, const std::string& path,
                                         const std::string& name) {
  Id space(H5Dget_space(dataset), H5Sclose);
  if (!space.valid()) refuse(path, "cannot read the shape of '" + name + "' (HDF5: " + cause() + ")");
  const int rank = H5Sget_simple_extent_ndims(space.get());
  std::vector<hsize_t> dims(static_cast<std::size_t>(std::max(rank, 0)));
  if (rank < 0 || (rank > 0 && H5Sget_simple_extent_dims(space.get(), dims.data(), nullptr) < 0)) {
    refuse(path, "cannot read the shape of '" + name + "' (HDF5: " + cause() + ")");
  }
  std::string shape = "(";
  for (std::size_t k = 0; k < dims.size(); ++k) {
    shape += (k > 0 ? ", " : "") + std::to_string(dims[k]);
  }
  shape += dims.size() == 1 ? ",)" : ")";
  if (rank != 2) {
    refuse(path, "dataset '" + name + "' must be a 2-d array (got shape " + shape + ")");
  }
  if (dims[0] == 0 || dims[1] == 0) {
    refuse(path, "dataset '" + name + "' has the shape " + shape +
                     ", with no entries; a matrix needs at least one row and one column");
  }
  const auto limit = static_cast<hsize_t>(matrix_file::Limits{}.max_entries);
  if (dims[0] > limit || dims[1] > limit / dims[0]) {
    refuse(path, "dataset '" + name + "' has the shape " + shape + ", more than the " +
                     std::to_string(limit) + " entries a matrix may have");
  }
  return {dims[0], dims[1]};
}

std::string class_name(H5T_class_t c) {
  switch (c) {
    case H5T_STRING: return "strings";
    case H5T_BITFIELD: return "bit fields";
    case H5T_OPAQUE: return "opaque bytes";
    case H5T_REFERENCE: return "references";
    case H5T_ENUM: return "an enumeration (h5py stores booleans so)";
    case H5T_VLEN: return "variable-length sequences";
    case H5T_ARRAY: return "fixed-size arrays";
    case H5T_TIME: return "times";
    case H5T_COMPOUND: return "records";
    default: return "an unknown type";
  }
}

// Whether the element type is h5py's complex number: a compound of two floats, "r" and "i".
bool is_complex(hid_t type) {
  if (H5Tget_nmembers(type) != 2) return false;
  bool real = false, imaginary = false;
  for (unsigned k = 0; k < 2; ++k) {
    char* member = H5Tget_member_name(type, k);
    const std::string name = member == nullptr ? "" : member;
    H5free_memory(member);
    if (H5Tget_member_class(type, k) != H5T_FLOAT) return false;
    real = real || name == "r";
    imaginary = imaginary || name == "i";
  }
  return real && imaginary;
}

// Describes a compound type for a refusal: its members' names.
std::string members_of(hid_t type) {
  std::string out;
  const int count = H5Tget_nmembers(type);
  for (int k = 0; k < count && k < 10; ++k) {
    char* member = H5Tget_member_name(type, static_cast<unsigned>(k));
    out += (k > 0 ? ", " : "") + std::string(member == nullptr ? "?" : member);
    H5free_memory(member);
  }
  return out;
}

// The memory type of a complex element: two native doubles "r" and "i", as std::complex lays
// them out. HDF5 converts the file's members to them by name.
Id complex_memory_type() {
  Id type(H5Tcreate(H5T_COMPOUND, sizeof(std::complex<double>)), H5Tclose);
  H5Tinsert(type.get(), "r", 0, H5T_NATIVE_DOUBLE);
  H5Tinsert(type.get(), "i", sizeof(double), H5T_NATIVE_DOUBLE);
  return type;
}

// Reads the whole rows × cols dataset into M, which is column-major: read as cols × rows, then
// transposed in tiles (in place when square, so that a large square matrix needs no second copy).
template <class M>
M read_transposed(hid_t dataset, hid_t memory_type, hsize_t rows, hsize_t cols,
                  const std::string& path, const std::string& name) {
  M m;
  matrix_file::resize_for_filling(m, static_cast<Eigen::Index>(cols), static_cast<Eigen::Index>(rows));
  if (H5Dread(dataset, memory_type, H5S_ALL, H5S_ALL, H5P_DEFAULT, m.data()) < 0) {
    refuse(path, "cannot read dataset '" + name + "' (HDF5: " + cause() +
                     "); the file may be damaged or need a compression filter this HDF5 lacks");
  }
  return matrix_file::from_row_major(std::move(m));
}

// Refuses the first entry that is not finite (counting from 0, rows first, as h5py does).
template <class M>
void check_finite(const M& m, const std::string& path, const std::string& name) {
  if (m.allFinite()) return;
  for (Eigen::Index j = 0; j < m.cols(); ++j) {
    for (Eigen::Index i = 0; i < m.rows(); ++i) {
      const double re = std::real(m(i, j));
      const double im = std::imag(m(i, j));
      if (!std::isfinite(re) || !std::isfinite(im)) {
        refuse(path, "dataset '" + name + "': entry [" + std::to_string(i) + ", " +
                         std::to_string(j) + "] is " +
                         (std::isnan(re) || std::isnan(im) ? "nan" : "infinite") +
                         "; a matrix's entries must be finite numbers");
      }
    }
  }
}

}  // namespace

matrix_file::Matrix read_matrix_dataset(const std::string& path, const std::string& dataset) {
  const QuietErrors quiet;
  const Id file = open_file(path);
  const auto [data, name] = open_matrix_dataset(file.get(), path, dataset);
  const auto [rows, cols] = matrix_shape(data.get(), path, name);
  const Id type(H5Dget_type(data.get()), H5Tclose);
  if (!type.valid()) refuse(path, "cannot read the type of '" + name + "' (HDF5: " + cause() + ")");
  const H5T_class_t element = H5Tget_class(type.get());
  Matrix out;
  out.rows = static_cast<Eigen::Index>(rows);
  out.cols = static_cast<Eigen::Index>(cols);
  if (element == H5T_FLOAT || element == H5T_INTEGER) {
    out.real = read_transposed<Eigen::MatrixXd>(data.get(), H5T_NATIVE_DOUBLE, rows, cols, path,
                                                name);
    check_finite(out.real, path, name);
  } else if (element == H5T_COMPOUND && is_complex(type.get())) {
    out.complex = true;
    const Id memory = complex_memory_type();
    out.values = read_transposed<Eigen::MatrixXcd>(data.get(), memory.get(), rows, cols, path,
                                                   name);
    check_finite(out.values, path, name);
  } else {
    const std::string what = element == H5T_COMPOUND
                                 ? "records with the fields " + members_of(type.get())
                                 : class_name(element);
    refuse(path, "dataset '" + name + "' holds " + what +
                     "; a matrix must hold floats, integers or complex numbers (a compound of "
                     "two floats named \"r\" and \"i\", as h5py writes complex arrays)");
  }
  return out;
}

}  // namespace freegap::store
