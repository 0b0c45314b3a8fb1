// Checked HDF5 helpers for the run file (see h5.hpp).
#include "h5.hpp"

#include <memory>

#include "freegap/errors.hpp"

namespace freegap::store::h5 {
namespace {

herr_t collect(unsigned /*n*/, const H5E_error2_t* error, void* data) {
  auto* out = static_cast<std::vector<std::string>*>(data);
  if (error != nullptr && error->desc != nullptr) out->emplace_back(error->desc);
  return 0;
}

// Frees what HDF5 allocated for variable-length data read into a buffer.
struct VlenReclaim {
  hid_t type;
  hid_t space;
  void* buffer;
  ~VlenReclaim() { H5Dvlen_reclaim(type, space, H5P_DEFAULT, buffer); }
};

}  // namespace

void quiet() { H5Eset_auto2(H5E_DEFAULT, nullptr, nullptr); }

std::vector<std::string> error_stack() {
  std::vector<std::string> out;
  // Downward: from the API function to the innermost cause.
  H5Ewalk2(H5E_DEFAULT, H5E_WALK_DOWNWARD, collect, &out);
  return out;
}

std::string innermost_error() {
  const auto stack = error_stack();
  return stack.empty() ? std::string("unknown HDF5 error") : stack.back();
}

void fail(Where where, const std::string& what) {
  const std::string cause = innermost_error();
  H5Eclear2(H5E_DEFAULT);
  throw Error("run file '" + where.path + "': cannot " + what + " (HDF5: " + cause + ")");
}

Id own(hid_t id, Id::Closer closer, Where where, const std::string& what) {
  if (id < 0) fail(where, what);
  return Id(id, closer);
}

void check(herr_t status, Where where, const std::string& what) {
  if (status < 0) fail(where, what);
}

Id string_type(Where where) {
  Id type = own(H5Tcopy(H5T_C_S1), H5Tclose, where, "make a string type");
  check(H5Tset_size(type.get(), H5T_VARIABLE), where, "make a string type");
  check(H5Tset_cset(type.get(), H5T_CSET_UTF8), where, "make a string type");
  return type;
}

bool has_attribute(hid_t object, const char* name) { return H5Aexists(object, name) > 0; }

bool has_link(hid_t group, const char* name) { return H5Lexists(group, name, H5P_DEFAULT) > 0; }

void write_string_attribute(hid_t object, const char* name, const std::string& value, Where where) {
  const std::string what = std::string("write attribute '") + name + "'";
  Id type = string_type(where);
  Id space = own(H5Screate(H5S_SCALAR), H5Sclose, where, what);
  Id attribute = own(H5Acreate2(object, name, type.get(), space.get(), H5P_DEFAULT, H5P_DEFAULT),
                     H5Aclose, where, what);
  const char* text = value.c_str();
  check(H5Awrite(attribute.get(), type.get(), &text), where, what);
}

void write_int64_attribute(hid_t object, const char* name, std::int64_t value, Where where) {
  const std::string what = std::string("write attribute '") + name + "'";
  Id space = own(H5Screate(H5S_SCALAR), H5Sclose, where, what);
  Id attribute = own(H5Acreate2(object, name, H5T_STD_I64LE, space.get(), H5P_DEFAULT, H5P_DEFAULT),
                     H5Aclose, where, what);
  check(H5Awrite(attribute.get(), H5T_NATIVE_INT64, &value), where, what);
}

void write_int_array_attribute(hid_t object, const char* name, const std::vector<int>& values,
                               Where where) {
  const std::string what = std::string("write attribute '") + name + "'";
  const hsize_t dims[1] = {values.size()};
  Id space = own(H5Screate_simple(1, dims, nullptr), H5Sclose, where, what);
  Id attribute = own(H5Acreate2(object, name, H5T_STD_I32LE, space.get(), H5P_DEFAULT, H5P_DEFAULT),
                     H5Aclose, where, what);
  check(H5Awrite(attribute.get(), H5T_NATIVE_INT, values.data()), where, what);
}

std::string read_string_attribute(hid_t object, const char* name, Where where) {
  const std::string what = std::string("read attribute '") + name + "'";
  Id attribute = own(H5Aopen(object, name, H5P_DEFAULT), H5Aclose, where, what);
  Id file_type = own(H5Aget_type(attribute.get()), H5Tclose, where, what);
  if (H5Tget_class(file_type.get()) != H5T_STRING) {
    throw Error("run file '" + where.path + "': attribute '" + name + "' is not a string");
  }
  Id space = own(H5Aget_space(attribute.get()), H5Sclose, where, what);
  if (H5Sget_simple_extent_npoints(space.get()) != 1) {
    throw Error("run file '" + where.path + "': attribute '" + name + "' is not one string");
  }
  // HDF5 does not convert between character sets, so read with the file's own.
  const H5T_cset_t cset = H5Tget_cset(file_type.get());
  if (H5Tis_variable_str(file_type.get()) > 0) {
    Id type = string_type(where);
    check(H5Tset_cset(type.get(), cset), where, what);
    char* text = nullptr;
    check(H5Aread(attribute.get(), type.get(), &text), where, what);
    std::string out = text == nullptr ? std::string() : std::string(text);
    H5free_memory(text);
    return out;
  }
  // A fixed-length string (written by another program): read its bytes, drop the padding.
  const std::size_t size = H5Tget_size(file_type.get());
  Id type = own(H5Tcopy(H5T_C_S1), H5Tclose, where, what);
  check(H5Tset_size(type.get(), size + 1), where, what);
  check(H5Tset_strpad(type.get(), H5T_STR_NULLTERM), where, what);
  check(H5Tset_cset(type.get(), cset), where, what);
  std::string buffer(size + 1, '\0');
  check(H5Aread(attribute.get(), type.get(), buffer.data()), where, what);
  return std::string(buffer.c_str());
}

std::int64_t read_int64_attribute(hid_t object, const char* name, Where where) {
  const std::string what = std::string("read attribute '") + name + "'";
  Id attribute = own(H5Aopen(object, name, H5P_DEFAULT), H5Aclose, where, what);
  Id file_type = own(H5Aget_type(attribute.get()), H5Tclose, where, what);
  Id space = own(H5Aget_space(attribute.get()), H5Sclose, where, what);
  if (H5Tget_class(file_type.get()) != H5T_INTEGER ||
      H5Sget_simple_extent_npoints(space.get()) != 1) {
    throw Error("run file '" + where.path + "': attribute '" + name + "' is not one integer");
  }
  std::int64_t value = 0;
  check(H5Aread(attribute.get(), H5T_NATIVE_INT64, &value), where, what);
  return value;
}

std::vector<int> read_int_array_attribute(hid_t object, const char* name, Where where) {
  const std::string what = std::string("read attribute '") + name + "'";
  Id attribute = own(H5Aopen(object, name, H5P_DEFAULT), H5Aclose, where, what);
  Id file_type = own(H5Aget_type(attribute.get()), H5Tclose, where, what);
  Id space = own(H5Aget_space(attribute.get()), H5Sclose, where, what);
  const hssize_t count = H5Sget_simple_extent_npoints(space.get());
  if (H5Tget_class(file_type.get()) != H5T_INTEGER || count < 0) {
    throw Error("run file '" + where.path + "': attribute '" + name + "' is not integers");
  }
  std::vector<int> values(static_cast<std::size_t>(count));
  check(H5Aread(attribute.get(), H5T_NATIVE_INT, values.data()), where, what);
  return values;
}

Id create_dataset(hid_t group, const char* name, hid_t type, const Shape& shape, const void* fill,
                  Where where) {
  const std::string what = std::string("create dataset '") + name + "'";
  const auto rank = static_cast<int>(shape.dims.size());
  const auto& max_dims = shape.max_dims.empty() ? shape.dims : shape.max_dims;
  Id space = own(H5Screate_simple(rank, shape.dims.data(), max_dims.data()), H5Sclose, where, what);
  Id create = own(H5Pcreate(H5P_DATASET_CREATE), H5Pclose, where, what);
  if (!shape.chunk.empty()) {
    check(H5Pset_chunk(create.get(), rank, shape.chunk.data()), where, what);
  }
  if (fill != nullptr) check(H5Pset_fill_value(create.get(), type, fill), where, what);
  if (shape.checksum) check(H5Pset_fletcher32(create.get()), where, what);
  if (shape.allocate_now) {
    check(H5Pset_alloc_time(create.get(), H5D_ALLOC_TIME_EARLY), where, what);
  }
  return own(H5Dcreate2(group, name, type, space.get(), H5P_DEFAULT, create.get(), H5P_DEFAULT),
             H5Dclose, where, what);
}

Id open_dataset(hid_t group, const std::string& name, Where where) {
  return own(H5Dopen2(group, name.c_str(), H5P_DEFAULT), H5Dclose, where,
             "open dataset '" + name + "'");
}

Id open_group(hid_t parent, const std::string& name, Where where) {
  return own(H5Gopen2(parent, name.c_str(), H5P_DEFAULT), H5Gclose, where,
             "open group '" + name + "'");
}

std::vector<hsize_t> extent(hid_t dataset, Where where) {
  Id space = own(H5Dget_space(dataset), H5Sclose, where, "read a dataset's shape");
  const int rank = H5Sget_simple_extent_ndims(space.get());
  if (rank < 0) fail(where, "read a dataset's shape");
  std::vector<hsize_t> dims(static_cast<std::size_t>(rank));
  check(H5Sget_simple_extent_dims(space.get(), dims.data(), nullptr), where,
        "read a dataset's shape");
  return dims;
}

std::vector<hsize_t> extent_within_file(hid_t dataset, std::size_t bytes_each, Where where,
                                        const std::string& name) {
  const auto dims = extent(dataset, where);
  Id file = own(H5Iget_file_id(dataset), H5Fclose, where, "find the file of '" + name + "'");
  hsize_t file_size = 0;
  check(H5Fget_filesize(file.get(), &file_size), where, "read the file's size");
  // Element count times bytes_each, saturating: any overflow is more than any file holds.
  hsize_t bytes = bytes_each;
  for (const hsize_t d : dims) {
    if (d != 0 && bytes > file_size / d) {
      throw Error("dataset '" + name + "' claims more elements than the file holds");
    }
    bytes *= d;
  }
  if (bytes > file_size) {
    throw Error("dataset '" + name + "' claims more elements than the file holds");
  }
  return dims;
}

namespace {

bool empty_block(const std::vector<hsize_t>& count) {
  for (const hsize_t c : count) {
    if (c == 0) return true;
  }
  return false;
}

// The file dataspace with the block selected, and a matching dense memory dataspace.
std::pair<Id, Id> block_spaces(hid_t dataset, const std::vector<hsize_t>& start,
                               const std::vector<hsize_t>& count, Where where,
                               const std::string& what) {
  Id file_space = own(H5Dget_space(dataset), H5Sclose, where, what);
  check(H5Sselect_hyperslab(file_space.get(), H5S_SELECT_SET, start.data(), nullptr, count.data(),
                            nullptr),
        where, what);
  Id mem_space = own(H5Screate_simple(static_cast<int>(count.size()), count.data(), nullptr),
                     H5Sclose, where, what);
  return {std::move(file_space), std::move(mem_space)};
}

}  // namespace

void write_block(hid_t dataset, hid_t mem_type, const std::vector<hsize_t>& start,
                 const std::vector<hsize_t>& count, const void* buffer, Where where,
                 const std::string& what) {
  if (empty_block(count)) return;
  auto [file_space, mem_space] = block_spaces(dataset, start, count, where, what);
  check(H5Dwrite(dataset, mem_type, mem_space.get(), file_space.get(), H5P_DEFAULT, buffer), where,
        what);
}

void overwrite_block(hid_t dataset, hid_t mem_type, const std::vector<hsize_t>& start,
                     const std::vector<hsize_t>& count, const void* buffer, Where where,
                     const std::string& what) {
  if (empty_block(count)) return;
  auto [file_space, mem_space] = block_spaces(dataset, start, count, where, what);
  Id transfer = own(H5Pcreate(H5P_DATASET_XFER), H5Pclose, where, what);
  check(H5Pset_edc_check(transfer.get(), H5Z_DISABLE_EDC), where, what);
  check(H5Dwrite(dataset, mem_type, mem_space.get(), file_space.get(), transfer.get(), buffer),
        where, what);
}

void read_block(hid_t dataset, hid_t mem_type, const std::vector<hsize_t>& start,
                const std::vector<hsize_t>& count, void* buffer, Where where,
                const std::string& what) {
  if (empty_block(count)) return;
  auto [file_space, mem_space] = block_spaces(dataset, start, count, where, what);
  check(H5Dread(dataset, mem_type, mem_space.get(), file_space.get(), H5P_DEFAULT, buffer), where,
        what);
}

std::vector<std::string> read_strings(hid_t dataset, hsize_t start, hsize_t count, Where where,
                                      const std::string& what) {
  return read_strings(dataset, std::vector<hsize_t>{start}, std::vector<hsize_t>{count}, where,
                      what);
}

std::vector<std::string> read_strings(hid_t dataset, const std::vector<hsize_t>& start,
                                      const std::vector<hsize_t>& counts, Where where,
                                      const std::string& what) {
  std::vector<std::string> out;
  hsize_t count = 1;
  for (const auto c : counts) count *= c;
  if (count == 0) return out;
  Id type = string_type(where);
  {
    Id file_type = own(H5Dget_type(dataset), H5Tclose, where, what);
    check(H5Tset_cset(type.get(), H5Tget_cset(file_type.get())), where, what);
  }
  auto [file_space, mem_space] = block_spaces(dataset, start, counts, where, what);
  std::vector<char*> pointers(count, nullptr);
  check(
      H5Dread(dataset, type.get(), mem_space.get(), file_space.get(), H5P_DEFAULT, pointers.data()),
      where, what);
  const VlenReclaim reclaim{type.get(), mem_space.get(), pointers.data()};
  out.reserve(count);
  for (const char* p : pointers) out.emplace_back(p == nullptr ? "" : p);
  return out;
}

}  // namespace freegap::store::h5
