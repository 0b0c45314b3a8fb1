// Internal to store: owners for HDF5 identifiers and small checked helpers. Every failure becomes
// a freegap::Error naming the file, what was being done and HDF5's own innermost reason, so no
// HDF5 error stack is ever printed (automatic printing is switched off per thread).
#pragma once

#include <hdf5.h>

#include <cstdint>
#include <string>
#include <utility>
#include <vector>

namespace freegap::store::h5 {

/// Switches off HDF5's automatic error printing for the calling thread (the threadsafe build
/// keeps that setting per thread, so every entry point calls this).
void quiet();

/// The descriptions on the calling thread's HDF5 error stack, outermost (the API call) first.
std::vector<std::string> error_stack();
/// The innermost description, or "unknown HDF5 error".
std::string innermost_error();

/// Owns one HDF5 identifier and closes it with the matching H5*close. Move-only.
class Id {
 public:
  using Closer = herr_t (*)(hid_t);
  Id() = default;
  Id(hid_t id, Closer closer) : id_(id), closer_(closer) {}
  Id(Id&& other) noexcept
      : id_(std::exchange(other.id_, H5I_INVALID_HID)), closer_(other.closer_) {}
  Id& operator=(Id&& other) noexcept {
    if (this != &other) {
      reset();
      id_ = std::exchange(other.id_, H5I_INVALID_HID);
      closer_ = other.closer_;
    }
    return *this;
  }
  Id(const Id&) = delete;
  Id& operator=(const Id&) = delete;
  ~Id() { reset(); }

  hid_t get() const { return id_; }
  bool valid() const { return id_ >= 0; }
  /// Closes now; a close failure is ignored (used on error paths and in destructors).
  void reset() noexcept {
    if (id_ >= 0 && closer_ != nullptr) closer_(id_);
    id_ = H5I_INVALID_HID;
  }

 private:
  hid_t id_ = H5I_INVALID_HID;
  Closer closer_ = nullptr;
};

/// The context of every helper: which file, for messages.
struct Where {
  const std::string& path;
};

/// Throws Error("run file 'P': cannot WHAT (HDF5: innermost reason)").
[[noreturn]] void fail(Where where, const std::string& what);
/// Returns an owner of `id`, or fails with `what` if HDF5 returned a negative id.
Id own(hid_t id, Id::Closer closer, Where where, const std::string& what);
/// Fails with `what` if `status` is negative.
void check(herr_t status, Where where, const std::string& what);

/// A variable-length UTF-8 string type (h5py reads it as str).
Id string_type(Where where);

bool has_attribute(hid_t object, const char* name);
bool has_link(hid_t group, const char* name);

void write_string_attribute(hid_t object, const char* name, const std::string& value, Where where);
void write_int64_attribute(hid_t object, const char* name, std::int64_t value, Where where);
void write_int_array_attribute(hid_t object, const char* name, const std::vector<int>& values,
                               Where where);
/// Reads a string attribute, variable-length or fixed-length. Fails if it is not a string.
std::string read_string_attribute(hid_t object, const char* name, Where where);
std::int64_t read_int64_attribute(hid_t object, const char* name, Where where);
std::vector<int> read_int_array_attribute(hid_t object, const char* name, Where where);

/// Creation options of a dataset.
struct Shape {
  std::vector<hsize_t> dims;
  std::vector<hsize_t> max_dims;  ///< empty: same as dims
  std::vector<hsize_t> chunk;     ///< empty: contiguous
  /// Allocate (and fill) every chunk when the dataset is created, so later writes change only
  /// raw data, never the chunk index (see docs/run-file.md, "Why the file survives a kill").
  bool allocate_now = false;
  /// Store a Fletcher-32 checksum with every chunk (chunked datasets only): a read of a chunk
  /// whose bytes changed fails instead of returning them.
  bool checksum = false;
};

/// Creates a dataset of `type` (a fill value is set only when `fill` is not null).
Id create_dataset(hid_t group, const char* name, hid_t type, const Shape& shape, const void* fill,
                  Where where);
Id open_dataset(hid_t group, const std::string& name, Where where);
Id open_group(hid_t parent, const std::string& name, Where where);
/// The current extent of a dataset.
std::vector<hsize_t> extent(hid_t dataset, Where where);
/// The extent of a dataset that is written whole and stored without compression, so that each of
/// its elements takes at least `bytes_each` bytes of the file: a damaged shape that claims more
/// elements than the file can hold is an Error before any buffer is sized by it (HDF5 itself
/// finds the overflow only after the reader allocated the buffer, seconds and gigabytes later).
std::vector<hsize_t> extent_within_file(hid_t dataset, std::size_t bytes_each, Where where,
                                        const std::string& name);

/// Writes/reads the block start..start+count of a dataset from/to a dense memory buffer of
/// `mem_type`. A block with no elements does nothing.
void write_block(hid_t dataset, hid_t mem_type, const std::vector<hsize_t>& start,
                 const std::vector<hsize_t>& count, const void* buffer, Where where,
                 const std::string& what);
void read_block(hid_t dataset, hid_t mem_type, const std::vector<hsize_t>& start,
                const std::vector<hsize_t>& count, void* buffer, Where where,
                const std::string& what);

/// The same write without verifying the checksums of chunks HDF5 reads back to merge a partial
/// write: used only to rewrite a unit found damaged, whose old chunk may fail its checksum.
void overwrite_block(hid_t dataset, hid_t mem_type, const std::vector<hsize_t>& start,
                     const std::vector<hsize_t>& count, const void* buffer, Where where,
                     const std::string& what);

/// Reads `count` variable-length strings starting at `start` of a 1-D string dataset (a null
/// pointer, e.g. a never-written element, reads as "").
std::vector<std::string> read_strings(hid_t dataset, hsize_t start, hsize_t count, Where where,
                                      const std::string& what);
/// The same for any block of a string dataset of any rank, in row-major order.
std::vector<std::string> read_strings(hid_t dataset, const std::vector<hsize_t>& start,
                                      const std::vector<hsize_t>& count, Where where,
                                      const std::string& what);

}  // namespace freegap::store::h5
