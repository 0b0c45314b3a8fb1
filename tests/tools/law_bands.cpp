// Prints the bands, atoms, densities and CDF of a free additive convolution (or, for a first law
// "mp", of the free multiplicative convolution MP(ratio) ⊠ atoms) for the independent cross-checks
// tests/limits/check_law_bands.py and check_law_bands_multiplicative.py. Reads from standard
// input:
//   <first law>                 semicircle <variance> | uniform <a> <b> | mp <ratio>
//   <k>                         number of atoms of the second law, then k lines <value> <weight>
//   <n>                         number of points, then n lines <x>
// and prints, with %.17g:
//   band <lo> <hi>              one line per band of the continuous part
//   atom <value> <mass>
//   point <x> <density> <cdf>
//   seconds <construction> <points>
#include <chrono>
#include <cstdio>
#include <iostream>
#include <string>
#include <vector>

#include "freegap/analysis/limits/free_convolution.hpp"
#include "freegap/analysis/limits/laws.hpp"

namespace fa = freegap::analysis;

int main() {
  std::string kind;
  std::cin >> kind;
  fa::LawPtr first;
  bool multiplicative = false;
  if (kind == "mp") {
    double c = 0.0;
    std::cin >> c;
    first = fa::marchenko_pastur(c);
    multiplicative = true;
  } else if (kind == "semicircle") {
    double v = 0.0;
    std::cin >> v;
    first = fa::semicircle(v);
  } else if (kind == "uniform") {
    double a = 0.0, b = 0.0;
    std::cin >> a >> b;
    first = fa::uniform(a, b);
  } else {
    std::cerr << "law_bands: unknown first law '" << kind << "'\n";
    return 2;
  }
  std::size_t k = 0;
  std::cin >> k;
  std::vector<fa::Atom> atoms(k);
  for (auto& a : atoms) std::cin >> a.value >> a.weight;
  std::size_t n = 0;
  std::cin >> n;
  std::vector<double> xs(n);
  for (double& x : xs) std::cin >> x;
  if (!std::cin) {
    std::cerr << "law_bands: malformed input\n";
    return 2;
  }
  const auto start = std::chrono::steady_clock::now();
  const fa::LawPtr law = multiplicative ? fa::LawPtr(fa::free_multiplicative(first, fa::atoms(atoms)))
                                        : fa::LawPtr(fa::free_additive(first, fa::atoms(atoms)));
  const fa::Support s = law->support();
  const auto built = std::chrono::steady_clock::now();
  const std::vector<double> densities = law->densities(xs);
  std::vector<double> cdfs;
  for (double x : xs) cdfs.push_back(law->cdf(x));
  const auto done = std::chrono::steady_clock::now();
  for (const fa::Interval& b : s.bands) std::printf("band %.17g %.17g\n", b.lo, b.hi);
  for (const fa::Atom& a : s.atoms) std::printf("atom %.17g %.17g\n", a.value, a.weight);
  for (std::size_t i = 0; i < n; ++i) {
    std::printf("point %.17g %.17g %.17g\n", xs[i], densities[i], cdfs[i]);
  }
  std::printf("seconds %.6f %.6f\n", std::chrono::duration<double>(built - start).count(),
              std::chrono::duration<double>(done - built).count());
  return 0;
}
