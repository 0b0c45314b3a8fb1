// Test helper: writes sampled matrices and freegap's eigenvalues to files, so that a separate
// process (another run of this program, or numpy) can check them bit for bit or to a tolerance.
//
// Usage (every option is "--key value"):
//   dump_matrices sample   --kind K --n N --seed S --trial T [--name A] [--ratio C]
//                          [--haar qr|polar] [--atoms v:w,v:w,...] --out PREFIX
//       writes PREFIX.matrix.bin and, for a dense self-adjoint matrix, PREFIX.eig_classic.bin and
//       PREFIX.eig_two_stage.bin (linalg::eigenvalues with each driver).
//   dump_matrices checksum (same key options, no --out)
//       prints "storage=<s> rows=<r> cols=<c> fnv1a64=<16 hex digits>" for the matrix's data bytes.
//   dump_matrices hex      (same key options, no --out)
//       prints the same first line, then every stored double as 16 hex digits of its bit
//       pattern, one per line, in storage order (complex: real, imaginary).
//   dump_matrices eig      --in FILE --out PREFIX
//       reads a matrix file (for instance one numpy wrote) and writes PREFIX.eig_classic.bin
//       and PREFIX.eig_two_stage.bin; only the lower triangle is read, as LAPACK does.
//
// File format (our own, little-endian; the test machine is x86-64):
//   8 bytes  magic "FGDUMP01"
//   uint64   storage: 0 = real dense, 1 = complex dense, 2 = real diagonal (the N diagonal
//            entries only), 3 = real vector (eigenvalues)
//   uint64   rows
//   uint64   cols (1 for storage 2 and 3)
//   then the float64 values in column-major order; complex entries as (real, imaginary) pairs.
// Raw float64 keeps full precision with no text round trip; numpy reads it with np.fromfile.
#include <cinttypes>
#include <complex>
#include <cstdint>
#include <cstdio>
#include <cstring>
#include <exception>
#include <fstream>
#include <map>
#include <stdexcept>
#include <string>
#include <string_view>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/errors.hpp"
#include "freegap/linalg.hpp"
#include "freegap/rng.hpp"

namespace {

namespace ens = freegap::ensembles;
namespace la = freegap::linalg;

constexpr char kMagic[8] = {'F', 'G', 'D', 'U', 'M', 'P', '0', '1'};

enum StorageCode : std::uint64_t {
  kRealDense = 0,
  kComplexDense = 1,
  kRealDiagonal = 2,
  kRealVector = 3
};

struct Blob {
  std::uint64_t storage = kRealDense;
  std::uint64_t rows = 0;
  std::uint64_t cols = 0;
  const double* data = nullptr;
  std::size_t count = 0;  // number of doubles
};

Blob blob_of(const ens::Sample& s) {
  using St = ens::Sample::Storage;
  switch (s.storage) {
    case St::real_dense:
      return {kRealDense, static_cast<std::uint64_t>(s.real.rows()),
              static_cast<std::uint64_t>(s.real.cols()), s.real.data(),
              static_cast<std::size_t>(s.real.size())};
    case St::complex_dense:
      return {kComplexDense, static_cast<std::uint64_t>(s.complex.rows()),
              static_cast<std::uint64_t>(s.complex.cols()),
              reinterpret_cast<const double*>(s.complex.data()),
              2 * static_cast<std::size_t>(s.complex.size())};
    case St::real_diagonal:
      return {kRealDiagonal, static_cast<std::uint64_t>(s.diagonal.size()), 1, s.diagonal.data(),
              static_cast<std::size_t>(s.diagonal.size())};
  }
  throw std::logic_error("unknown storage");
}

void write_blob(const std::string& path, const Blob& b) {
  std::ofstream out(path, std::ios::binary);
  if (!out) throw std::runtime_error("cannot open '" + path + "' for writing");
  out.write(kMagic, sizeof kMagic);
  for (std::uint64_t word : {b.storage, b.rows, b.cols}) {
    out.write(reinterpret_cast<const char*>(&word), sizeof word);
  }
  out.write(reinterpret_cast<const char*>(b.data),
            static_cast<std::streamsize>(b.count * sizeof(double)));
  if (!out) throw std::runtime_error("write to '" + path + "' failed");
  std::printf("wrote %s\n", path.c_str());
}

void write_vector(const std::string& path, const la::Vector& v) {
  write_blob(path, {kRealVector, static_cast<std::uint64_t>(v.size()), 1, v.data(),
                    static_cast<std::size_t>(v.size())});
}

struct Options {
  std::map<std::string, std::string> values;

  const std::string& get(const std::string& key) const {
    const auto it = values.find(key);
    if (it == values.end()) throw std::runtime_error("missing option --" + key);
    return it->second;
  }
  std::string get_or(const std::string& key, const std::string& fallback) const {
    const auto it = values.find(key);
    return it == values.end() ? fallback : it->second;
  }
};

Options parse_options(int argc, char** argv) {
  Options options;
  for (int i = 2; i < argc; i += 2) {
    const std::string_view flag = argv[i];
    if (flag.substr(0, 2) != "--" || i + 1 >= argc) {
      throw std::runtime_error("expected --key value, got '" + std::string(flag) + "'");
    }
    options.values[std::string(flag.substr(2))] = argv[i + 1];
  }
  return options;
}

// "v:w,v:w" → atoms; the default is ±1 with weight 1/2 each.
std::vector<ens::Atom> parse_atoms(const std::string& text) {
  std::vector<ens::Atom> atoms;
  std::size_t start = 0;
  while (start < text.size()) {
    std::size_t end = text.find(',', start);
    if (end == std::string::npos) end = text.size();
    const std::string item = text.substr(start, end - start);
    const std::size_t colon = item.find(':');
    if (colon == std::string::npos) throw std::runtime_error("atom '" + item + "' is not v:w");
    atoms.push_back({std::stod(item.substr(0, colon)), std::stod(item.substr(colon + 1))});
    start = end + 1;
  }
  return atoms;
}

ens::MatrixSpec spec_from(const Options& o) {
  ens::MatrixSpec spec;
  spec.kind = ens::parse_kind(o.get("kind"));
  spec.name = o.get_or("name", "A");
  spec.ratio = std::stod(o.get_or("ratio", "1"));
  const std::string haar = o.get_or("haar", "qr");
  if (haar == "qr") {
    spec.haar = ens::HaarMethod::qr;
  } else if (haar == "polar") {
    spec.haar = ens::HaarMethod::polar;
  } else {
    throw std::runtime_error("--haar must be qr or polar");
  }
  spec.diagonal.kind = ens::DiagonalLawKind::atoms;
  spec.diagonal.atoms = parse_atoms(o.get_or("atoms", "-1:0.5,1:0.5"));
  return spec;
}

ens::Sample draw_from(const Options& o) {
  const ens::Sampler sampler(spec_from(o));
  return sampler.draw(static_cast<ens::Index>(std::stoll(o.get("n"))), std::stoull(o.get("seed")),
                      std::stoull(o.get("trial")));
}

void print_summary(const Blob& b) {
  const std::string_view bytes(reinterpret_cast<const char*>(b.data), b.count * sizeof(double));
  std::printf("storage=%" PRIu64 " rows=%" PRIu64 " cols=%" PRIu64 " fnv1a64=%016" PRIx64 "\n",
              b.storage, b.rows, b.cols, freegap::rng::fnv1a64(bytes));
}

void write_both_eigenvalue_files(const std::string& prefix, const la::CMatrix& a) {
  la::CMatrix work = a;
  write_vector(prefix + ".eig_classic.bin", la::eigenvalues(work, la::EigenDriver::classic));
  work = a;
  write_vector(prefix + ".eig_two_stage.bin", la::eigenvalues(work, la::EigenDriver::two_stage));
}

void write_both_eigenvalue_files(const std::string& prefix, const la::RMatrix& a) {
  la::RMatrix work = a;
  write_vector(prefix + ".eig_classic.bin", la::eigenvalues(work, la::EigenDriver::classic));
  work = a;
  write_vector(prefix + ".eig_two_stage.bin", la::eigenvalues(work, la::EigenDriver::two_stage));
}

int run_sample(const Options& o) {
  const ens::Sample s = draw_from(o);
  const std::string prefix = o.get("out");
  const Blob b = blob_of(s);
  write_blob(prefix + ".matrix.bin", b);
  print_summary(b);
  const bool square = s.rows() == s.cols();
  if (ens::is_self_adjoint(ens::parse_kind(o.get("kind"))) && square) {
    if (s.storage == ens::Sample::Storage::complex_dense) {
      write_both_eigenvalue_files(prefix, s.complex);
    } else if (s.storage == ens::Sample::Storage::real_dense) {
      write_both_eigenvalue_files(prefix, s.real);
    }
  }
  return 0;
}

int run_checksum(const Options& o, bool hex) {
  const ens::Sample s = draw_from(o);
  const Blob b = blob_of(s);
  print_summary(b);
  if (hex) {
    for (std::size_t i = 0; i < b.count; ++i) {
      std::uint64_t bits = 0;
      std::memcpy(&bits, b.data + i, sizeof bits);
      std::printf("%016" PRIx64 "\n", bits);
    }
  }
  return 0;
}

int run_eig(const Options& o) {
  const std::string path = o.get("in");
  std::ifstream in(path, std::ios::binary);
  if (!in) throw std::runtime_error("cannot open '" + path + "'");
  char magic[8];
  std::uint64_t header[3];
  in.read(magic, sizeof magic);
  in.read(reinterpret_cast<char*>(header), sizeof header);
  if (!in || std::memcmp(magic, kMagic, sizeof kMagic) != 0) {
    throw std::runtime_error("'" + path + "' is not a matrix dump");
  }
  const auto storage = header[0];
  const auto rows = static_cast<la::Index>(header[1]);
  const auto cols = static_cast<la::Index>(header[2]);
  if (rows != cols) throw std::runtime_error("'" + path + "' holds a non-square matrix");
  const std::string prefix = o.get("out");
  if (storage == kComplexDense) {
    la::CMatrix a(rows, cols);
    in.read(reinterpret_cast<char*>(a.data()),
            static_cast<std::streamsize>(a.size() * sizeof(std::complex<double>)));
    if (!in) throw std::runtime_error("'" + path + "' is truncated");
    write_both_eigenvalue_files(prefix, a);
  } else if (storage == kRealDense) {
    la::RMatrix a(rows, cols);
    in.read(reinterpret_cast<char*>(a.data()),
            static_cast<std::streamsize>(a.size() * sizeof(double)));
    if (!in) throw std::runtime_error("'" + path + "' is truncated");
    write_both_eigenvalue_files(prefix, a);
  } else {
    throw std::runtime_error("'" + path + "' is not a dense matrix");
  }
  return 0;
}

}  // namespace

int main(int argc, char** argv) {
  if (argc < 2) {
    std::fprintf(stderr, "usage: dump_matrices sample|checksum|hex|eig --key value ...\n");
    return 2;
  }
  try {
    const std::string mode = argv[1];
    const Options options = parse_options(argc, argv);
    if (mode == "sample") return run_sample(options);
    if (mode == "checksum") return run_checksum(options, false);
    if (mode == "hex") return run_checksum(options, true);
    if (mode == "eig") return run_eig(options);
    std::fprintf(stderr, "unknown mode '%s'\n", mode.c_str());
    return 2;
  } catch (const std::exception& e) {
    std::fprintf(stderr, "dump_matrices: %s\n", e.what());
    return 1;
  }
}
