// The canonical text of a job and its hash. A run file is tied to the job that made it by this hash
// (docs/design.md rule 3), so it must change exactly when the numbers could: every field entering a
// trial or an observation is in it, printed in one fixed order and format; the name, the output
// path, the memory limit, the file's comments, key order and layout are not.
#include <charconv>
#include <string>

#include "freegap/job.hpp"
#include "freegap/text.hpp"

namespace freegap::job {

namespace {

using declarations::DiagonalLawKind;
using declarations::Kind;

// %.17g round-trips every double, so two different parameters never print alike (text.hpp).
using text::exact;

// Free text carries its length so that no content (newlines, '=' signs) can imitate a field.
std::string with_length(const std::string& text) {
  return std::to_string(text.size()) + ":" + text;
}

std::string law_words(const declarations::DiagonalLaw& law) {
  switch (law.kind) {
    case DiagonalLawKind::atoms: {
      std::string out = "law = atoms; atoms =";
      for (const auto& atom : law.atoms) {
        out += ' ';
        out += exact(atom.value);
        out += '@';
        out += exact(atom.weight);
      }
      return out;
    }
    case DiagonalLawKind::uniform:
      return "law = uniform; low = " + exact(law.low) + "; high = " + exact(law.high);
    case DiagonalLawKind::semicircle_quantiles:
      return "law = semicircle; variance = " + exact(law.variance);
    case DiagonalLawKind::marchenko_pastur_quantiles:
      return "law = marchenko_pastur; ratio = " + exact(law.ratio);
    case DiagonalLawKind::file:
      return "law = file";  // the numbers' digest follows; the path is where, not what
    case DiagonalLawKind::spiked: {
      std::string out = "law = spiked; spikes =";
      for (const double v : law.spikes) {
        out += ' ';
        out += exact(v);
      }
      return out + "; base = " + exact(law.base);
    }
  }
  return "law = ?";
}

// Appends the line of matrix `m`, the i-th of the job (`file_digests` holds the digests of
// eigenvalue files, by matrix).
void append_matrix(std::string& out, const declarations::MatrixSpec& m, std::size_t i,
                   const std::vector<std::string>& file_digests) {
  // Parameters that apply to the ensemble only: the others are unused defaults, and printing
  // them would tie the hash to defaults that do not affect the numbers.
  out += "matrix " + m.name + ": ensemble = " + std::string(declarations::kind_name(m.kind));
  switch (m.kind) {
    case Kind::wishart_complex:
    case Kind::wishart_real:
    case Kind::ginibre_complex:
    case Kind::ginibre_real:
      out += "; ratio = " + exact(m.ratio);
      break;
    case Kind::haar_unitary:
    case Kind::haar_orthogonal:
      out += m.haar == declarations::HaarMethod::qr ? "; method = qr" : "; method = polar";
      break;
    case Kind::diagonal:
      out += "; " + law_words(m.diagonal);
      if (m.diagonal.kind == DiagonalLawKind::file) {
        out += "; values = " + (i < file_digests.size() ? file_digests[i] : std::string("?"));
      }
      break;
    case Kind::gue:
    case Kind::goe:
    case Kind::wigner_rademacher:
      break;
    case Kind::beta_hermite:
      out += "; beta = " + exact(m.beta);
      break;
    case Kind::beta_laguerre:
      out += "; beta = " + exact(m.beta) + "; ratio = " + exact(m.ratio);
      break;
    case Kind::toeplitz: {
      // Trailing zero coefficients change no entry: [0, 1] and [0, 1, 0] are one matrix.
      std::size_t k = m.coefficients.size();
      while (k > 1 && m.coefficients[k - 1] == 0.0) --k;
      out += "; coefficients =";
      for (std::size_t i = 0; i < k; ++i) {
        out += ' ';
        out += exact(m.coefficients[i]);
      }
      out += m.circulant ? "; circulant" : "; banded";
      break;
    }
    case Kind::jacobi:
      out += "; diagonal =";
      for (const double v : m.jacobi_diagonal) out += " " + exact(v);
      out += "; off_diagonal =";
      for (const double v : m.jacobi_off_diagonal) out += " " + exact(v);
      break;
    case Kind::file_matrix:
      // The entries' digest (per size with {N}); the path and dataset are where, not what.
      out += std::string(declarations::file_matrix_per_size(m) ? "; a file per size" : "; one file") +
             "; values = " + (i < file_digests.size() ? file_digests[i] : std::string("?"));
      break;
  }
  out += "\n";
}

// Appends the lines of estimator `e`: its source, timeout, parameters and truths.
void append_estimator(std::string& out, const EstimatorSpec& e) {
  out += "estimator " + e.name + ":";
  switch (e.source) {
    case EstimatorSpec::Source::builtin:
      out += " builtin = " + with_length(e.builtin);
      break;
    case EstimatorSpec::Source::library:
      out += " library sha256 = " + e.library_digest;
      break;
    case EstimatorSpec::Source::command:
      out += " command =";
      for (const auto& word : e.command) {
        out += ' ';
        out += with_length(word);
      }
      break;
  }
  out += "; timeout = " + exact(e.timeout) + "\n";
  for (const auto& [key, value] : e.parameters) {
    out += "  parameter " + key + " = " + with_length(value) + "\n";
  }
  for (std::size_t i = 0; i < e.estimates.size(); ++i) {
    out += "  estimate " + e.estimates[i] + ": truth = " + with_length(e.truths[i]) + "\n";
  }
}

}  // namespace

std::string Job::canonical() const {
  std::string out = "freegap job canonical 1\n";
  out += "seed = " + std::to_string(seed) + "\n";
  out += "sizes =";
  // Appended piece by piece: GCC 12 warns falsely (-Wrestrict) on " " + std::to_string(n).
  for (const auto n : sizes) {
    out += ' ';
    out += std::to_string(n);
  }
  out += "\ntrials =";
  for (const auto t : trials) {
    out += ' ';
    out += std::to_string(t);
  }
  out += "\ntrials_per_unit = " + std::to_string(trials_per_unit) + "\n";
  for (std::size_t i = 0; i < matrices.size(); ++i) {
    append_matrix(out, matrices[i], i, file_digests);
  }
  out += "expression = " + with_length(expression) + "\n";
  const char* spectrum = observe.singular_values ? "spectrum = singular_values\n" : "spectrum = auto\n";
  if (observe.extremes_only) {
    // Printed only when set, so that other jobs keep their hash; nothing else is observed then.
    out += std::string("observe: extremes_only = true; ") + spectrum;
    // The krylov path's accuracy, likewise only when given.
    if (observe.extremes_tolerance > 0) {
      out += "observe: extremes_tolerance = " + exact(observe.extremes_tolerance) + "\n";
    }
    if (observe.extremes_max_steps > 0) {
      out += "observe: extremes_max_steps = " + std::to_string(observe.extremes_max_steps) + "\n";
    }
  } else {
    out += "observe: bins = " + std::to_string(observe.bins);
    if (observe.auto_range) {
      out += "; range = auto; margin = " + exact(observe.margin);
    } else {
      out += "; range = " + exact(observe.low) + " " + exact(observe.high);
    }
    out += "; max_moment = " + std::to_string(observe.max_moment);
    out += "; keep_spectra = " + std::to_string(observe.keep_spectra) + "; " + spectrum;
  }
  out += force_dense ? "force_dense = true\n" : "force_dense = false\n";
  // Only when given, so that jobs without the key keep their hash.
  if (run_path != "auto") out += "path = " + run_path + "\n";
  // Estimators define numbers in the file too (their estimates). Nothing is printed for a job
  // without them, so such jobs keep their hash. A library is identified by its bytes (the path is
  // where, not what); a command by its argv only — freegap cannot see what a program reads.
  for (const auto& e : estimators) append_estimator(out, e);
  return out;
}

std::string Job::hash() const { return sha256_hex(canonical()); }

}  // namespace freegap::job
