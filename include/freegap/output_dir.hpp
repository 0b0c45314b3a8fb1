// Output directories freegap writes as a whole (a report, a limit table): written beside the
// target first, then swapped into place; an existing directory is replaced only when freegap can
// prove it wrote everything in it.
#pragma once

#include <filesystem>
#include <string>

namespace freegap::output_dir {

/// The file inside every output directory that lists what freegap wrote there.
inline constexpr const char* kManifestName = ".freegap-output";

/// Throws InputError (naming `option`, e.g. "-o", and the fix) unless `dir` may be written as an
/// output of `kind` ("report", "limit"): it is absent, an empty directory, or a directory whose
/// every entry is listed in its manifest as written by freegap for that same kind.
void check_replaceable(const std::filesystem::path& dir, const std::string& kind,
                       const std::string& option);

/// A staging directory for one output. Write into path(); commit() writes the manifest and puts
/// the whole directory in place of the target (re-checking it first). Destroyed uncommitted,
/// it removes the staging directory and leaves the target as it was.
class Staged {
 public:
  Staged(const std::filesystem::path& dir, std::string kind, std::string option);
  ~Staged();
  Staged(const Staged&) = delete;
  Staged& operator=(const Staged&) = delete;

  const std::filesystem::path& path() const { return staging_; }
  /// The target as written (for messages).
  const std::filesystem::path& target() const { return target_; }
  void commit();

 private:
  void swap_into_place(const std::string& what);

  std::filesystem::path target_;   // as the user named it
  std::filesystem::path absolute_;  // lexically normal, absolute
  std::filesystem::path staging_;
  std::string kind_;
  std::string option_;
  bool committed_ = false;
};

}  // namespace freegap::output_dir
