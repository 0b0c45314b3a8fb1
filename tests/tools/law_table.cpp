// Prints density and CDF tables of every limit law (and three convolution results) for the scipy
// cross-check tests/limits/check_law_cdfs.py. Format, one block per law:
//   law <key> <lo> <hi>
//   <x> <density> <cdf>      (40 interior points, %.17g)
#include <cstdio>
#include <string>
#include <utility>
#include <vector>

#include "freegap/analysis/limits/free_convolution.hpp"
#include "freegap/analysis/limits/laws.hpp"

namespace fa = freegap::analysis;

int main() {
  const auto bern = fa::atoms({{-1.0, 0.5}, {1.0, 0.5}});
  const std::vector<std::pair<std::string, fa::LawPtr>> laws{
      {"semicircle_2", fa::semicircle(2.0)},
      {"mp_0.5", fa::marchenko_pastur(0.5)},
      {"mp_1", fa::marchenko_pastur(1.0)},
      {"mp_2", fa::marchenko_pastur(2.0)},
      {"arcsine", fa::arcsine()},
      {"km_2", fa::kesten_mckay(2)},
      {"km_3", fa::kesten_mckay(3)},
      {"uniform_-1_2", fa::uniform(-1.0, 2.0)},
      {"quarter_circle", fa::quarter_circle()},
      {"fc_2", fa::fuss_catalan(2)},
      {"fc_3", fa::fuss_catalan(3)},
      {"circular", fa::circular()},
      {"affine_sc_2_1", fa::affine(fa::semicircle(), 2.0, 1.0)},
      {"bern_plus_bern", fa::free_additive(bern, bern)},
      {"sc1_plus_sc2", fa::free_additive(fa::semicircle(1.0), fa::semicircle(2.0))},
      {"pi_times_pi",
       fa::free_multiplicative(fa::marchenko_pastur(1.0), fa::marchenko_pastur(1.0))},
  };
  for (const auto& [key, law] : laws) {
    const fa::Support s = law->support();
    std::printf("law %s %.17g %.17g\n", key.c_str(), s.lo, s.hi);
    const int n = 40;
    for (int i = 1; i < n; ++i) {
      const double x = s.lo + (s.hi - s.lo) * i / n;
      std::printf("%.17g %.17g %.17g\n", x, law->density(x), law->cdf(x));
    }
  }
  return 0;
}
