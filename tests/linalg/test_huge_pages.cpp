// linalg::advise_huge_pages / resize_fresh: a large fresh matrix is advised for transparent huge
// pages (so the kernel maps it 2 MiB at a time instead of 4 KiB on first touch), a plain Eigen
// allocation is not, and the advice follows the site's setting in
// /sys/kernel/mm/transparent_hugepage/enabled ("always", "madvise" or "never"). The check reads
// the kernel's own verdict, the THPeligible line of the mapping in /proc/self/smaps (Linux
// documentation, filesystems/proc.rst), which does not depend on free memory, so it cannot flake.
#include <gtest/gtest.h>

#include <cstdint>
#include <fstream>
#include <sstream>
#include <string>

#include "freegap/linalg.hpp"

namespace {

namespace linalg = freegap::linalg;

// The bracketed word of the kernel's setting, or "" where the kernel has no such file.
std::string thp_mode() {
  std::ifstream in("/sys/kernel/mm/transparent_hugepage/enabled");
  std::string line;
  if (!std::getline(in, line)) return "";
  const auto open = line.find('['), close = line.find(']');
  return open == std::string::npos || close == std::string::npos
             ? ""
             : line.substr(open + 1, close - open - 1);
}

// THPeligible of the mapping that holds `address`: 1 or 0, or −1 when no line says.
int eligible(const void* address) {
  const auto a = reinterpret_cast<std::uintptr_t>(address);
  std::ifstream in("/proc/self/smaps");
  std::string line;
  bool inside = false;
  while (std::getline(in, line)) {
    const auto dash = line.find('-');
    const auto space = line.find(' ');
    if (dash != std::string::npos && space != std::string::npos && dash < space &&
        line.find(':') > space) {
      // A mapping's header: "start-end perms ...".
      const auto start = std::stoull(line.substr(0, dash), nullptr, 16);
      const auto end = std::stoull(line.substr(dash + 1, space - dash - 1), nullptr, 16);
      inside = start <= a && a < end;
      continue;
    }
    if (inside && line.rfind("THPeligible:", 0) == 0) {
      return std::stoi(line.substr(12));
    }
  }
  return -1;
}

TEST(HugePages, LargeFreshMatricesAreAdvisedAndPlainOnesAreNot) {
  const std::string mode = thp_mode();
  // 2048 × 2048 complex: 64 MiB, far above kHugePageMinBytes, so glibc maps it on its own.
  Eigen::MatrixXcd advised;
  linalg::resize_fresh(advised, 2048, 2048);
  Eigen::MatrixXcd plain(2048, 2048);
  const void* middle_advised = advised.data() + advised.size() / 2;
  const void* middle_plain = plain.data() + plain.size() / 2;
  if (mode == "always") {
    EXPECT_EQ(eligible(middle_advised), 1);
    EXPECT_EQ(eligible(middle_plain), 1);
  } else if (mode == "madvise") {
    EXPECT_EQ(eligible(middle_advised), 1);  // fails without the advice
    EXPECT_EQ(eligible(middle_plain), 0);
  } else {
    // "never", or a kernel without transparent huge pages: the advice changes nothing.
    EXPECT_NE(eligible(middle_advised), 1) << "mode '" << mode << "'";
  }
  advised.setOnes();  // the memory is ordinary memory
  EXPECT_EQ(advised(2047, 2047), std::complex<double>(1.0, 0.0));
}

TEST(HugePages, ResizeFreshKeepsStorageOfTheSameShapeAndIgnoresSmallOnes) {
  Eigen::MatrixXd m;
  linalg::resize_fresh(m, 1500, 1500);
  const double* before = m.data();
  m(3, 4) = 2.5;
  linalg::resize_fresh(m, 1500, 1500);  // same shape: nothing happens, contents kept
  EXPECT_EQ(m.data(), before);
  EXPECT_EQ(m(3, 4), 2.5);
  linalg::resize_fresh(m, 10, 3);  // small: resized, not advised (no error either way)
  EXPECT_EQ(m.rows(), 10);
  EXPECT_EQ(m.cols(), 3);
  linalg::advise_huge_pages(nullptr, std::size_t{1} << 30);  // ignored
  linalg::advise_huge_pages(m.data(), 8);                    // ignored
}

}  // namespace
