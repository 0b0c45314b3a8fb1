// One trial of a model: sample → evaluate → spectrum (docs/design.md, data flow).
#include "freegap/model.hpp"

#include <chrono>
#include <algorithm>
#include <cctype>
#include <cmath>
#include <cstdio>

#include "freegap/errors.hpp"
#include "freegap/linalg.hpp"
#include "freegap/rng.hpp"
#include "freegap/tridiagonal.hpp"

namespace freegap::model {

namespace {

double seconds_since(std::chrono::steady_clock::time_point start) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
}

std::vector<ensembles::Sampler> make_samplers(const Model& model) {
  std::vector<ensembles::Sampler> out;
  out.reserve(model.matrices.size());
  for (const auto& spec : model.matrices) out.emplace_back(spec);
  return out;
}

// Which declared matrices the expression names: the identifiers of its text (a letter, then
// letters, digits or '_'), compared with the declared names.
std::vector<bool> used_matrices(const Model& model) {
  std::vector<std::string> words;
  const std::string& text = model.expression;
  for (std::size_t i = 0; i < text.size();) {
    if (std::isalpha(static_cast<unsigned char>(text[i]))) {
      std::size_t j = i;
      while (j < text.size() && (std::isalnum(static_cast<unsigned char>(text[j])) || text[j] == '_')) ++j;
      words.push_back(text.substr(i, j - i));
      i = j;
    } else if (std::isdigit(static_cast<unsigned char>(text[i]))) {
      // skip a number, including an exponent such as 1e-3 (but not the name in "2A")
      auto digit = [&](std::size_t k) {
        return k < text.size() && std::isdigit(static_cast<unsigned char>(text[k]));
      };
      while (digit(i) || (i < text.size() && text[i] == '.')) ++i;
      if (i < text.size() && (text[i] == 'e' || text[i] == 'E')) {
        const std::size_t k = (i + 1 < text.size() && (text[i + 1] == '+' || text[i + 1] == '-')) ? i + 2 : i + 1;
        if (digit(k)) {
          i = k;
          while (digit(i)) ++i;
        }
      }
    } else {
      ++i;
    }
  }
  std::vector<bool> used;
  for (const auto& spec : model.matrices) {
    used.push_back(std::find(words.begin(), words.end(), spec.name) != words.end());
  }
  return used;
}

[[noreturn]] void bad_declaration(const std::string& text, const std::string& what) {
  throw InputError("matrix declaration '" + text + "': " + what);
}

double parse_number(const std::string& text, const std::string& key, const std::string& value) {
  std::size_t used = 0;
  double v = 0.0;
  try {
    v = std::stod(value, &used);
  } catch (const std::exception&) {
    used = 0;
  }
  if (value.empty() || used != value.size()) {
    bad_declaration(text, key + " must be a number (got '" + value + "')");
  }
  return v;
}

std::vector<std::string> split(const std::string& text, char sep) {
  std::vector<std::string> parts;
  std::size_t start = 0;
  for (;;) {
    const auto at = text.find(sep, start);
    parts.push_back(text.substr(start, at - start));
    if (at == std::string::npos) break;
    start = at + 1;
  }
  return parts;
}

// β-ensembles have only their tridiagonal model; every other kind has a dense sampler.
bool has_dense_sampler(ensembles::Kind kind) {
  return kind != ensembles::Kind::beta_hermite && kind != ensembles::Kind::beta_laguerre;
}

// A diagonal's key=value of a command-line declaration; false when `key` is not a diagonal's.
bool set_diagonal_key(const std::string& text, const std::string& key, const std::string& value,
                      ensembles::MatrixSpec& spec, bool& law_given) {
  using ensembles::DiagonalLawKind;
  if (key == "law") {
    law_given = true;
    if (value == "atoms") spec.diagonal.kind = DiagonalLawKind::atoms;
    else if (value == "uniform") spec.diagonal.kind = DiagonalLawKind::uniform;
    else if (value == "semicircle") spec.diagonal.kind = DiagonalLawKind::semicircle_quantiles;
    else if (value == "marchenko_pastur") spec.diagonal.kind = DiagonalLawKind::marchenko_pastur_quantiles;
    else if (value == "file") spec.diagonal.kind = DiagonalLawKind::file;
    else if (value == "spiked") spec.diagonal.kind = DiagonalLawKind::spiked;
    else bad_declaration(text, "law must be atoms, uniform, semicircle, marchenko_pastur, file or spiked (got '" + value + "')");
  } else if (key == "atoms") {
    for (const auto& pair : split(value, ',')) {
      const auto at = pair.find('@');
      if (at == std::string::npos) {
        bad_declaration(text, "atoms are value@weight pairs separated by ',' (got '" + pair + "')");
      }
      spec.diagonal.atoms.push_back({parse_number(text, "atom value", pair.substr(0, at)),
                                     parse_number(text, "atom weight", pair.substr(at + 1))});
    }
  } else if (key == "low") {
    spec.diagonal.low = parse_number(text, key, value);
  } else if (key == "high") {
    spec.diagonal.high = parse_number(text, key, value);
  } else if (key == "variance") {
    spec.diagonal.variance = parse_number(text, key, value);
  } else if (key == "ratio") {
    spec.diagonal.ratio = parse_number(text, key, value);
  } else if (key == "path") {
    spec.diagonal.path = value;
  } else if (key == "spikes") {
    for (const auto& v : split(value, ',')) spec.diagonal.spikes.push_back(parse_number(text, "spike", v));
  } else if (key == "base") {
    spec.diagonal.base = parse_number(text, key, value);
  } else {
    return false;
  }
  return true;
}

}  // namespace

ensembles::MatrixSpec parse_declaration(const std::string& text) {
  using ensembles::DiagonalLawKind;
  const auto eq = text.find('=');
  if (eq == std::string::npos || eq == 0) {
    bad_declaration(text, "expected NAME=ENSEMBLE, e.g. X1=gue");
  }
  ensembles::MatrixSpec spec;
  spec.name = text.substr(0, eq);
  const bool identifier =
      std::isalpha(static_cast<unsigned char>(spec.name[0])) &&
      std::all_of(spec.name.begin(), spec.name.end(), [](char c) {
        return std::isalnum(static_cast<unsigned char>(c)) || c == '_';
      });
  if (!identifier) {
    bad_declaration(text, "a name is a letter followed by letters, digits or '_'");
  }
  const auto parts = split(text.substr(eq + 1), ':');
  spec.kind = ensembles::parse_kind(parts[0]);
  if (spec.kind == ensembles::Kind::file_matrix) {
    bad_declaration(text, "a matrix from a file is declared in a job file (ensemble = \"file\", "
                          "path = \"...\"), where its files are checked against the sizes");
  }
  bool law_given = false;
  for (std::size_t i = 1; i < parts.size(); ++i) {
    const auto kv = parts[i].find('=');
    if (kv == std::string::npos) bad_declaration(text, "expected key=value, got '" + parts[i] + "'");
    const std::string key = parts[i].substr(0, kv), value = parts[i].substr(kv + 1);
    const bool takes_ratio = spec.kind == ensembles::Kind::beta_laguerre ||
                             spec.kind == ensembles::Kind::wishart_complex ||
                             spec.kind == ensembles::Kind::wishart_real ||
                             spec.kind == ensembles::Kind::ginibre_complex ||
                             spec.kind == ensembles::Kind::ginibre_real;
    if (key == "ratio" && takes_ratio) {
      spec.ratio = parse_number(text, key, value);
    } else if (key == "beta" && (spec.kind == ensembles::Kind::beta_hermite ||
                                 spec.kind == ensembles::Kind::beta_laguerre)) {
      spec.beta = parse_number(text, key, value);
    } else if (key == "method" && ensembles::is_unitary(spec.kind)) {
      if (value == "qr") {
        spec.haar = ensembles::HaarMethod::qr;
      } else if (value == "polar") {
        spec.haar = ensembles::HaarMethod::polar;
      } else {
        bad_declaration(text, "method must be qr or polar (got '" + value + "')");
      }
    } else if (spec.kind == ensembles::Kind::diagonal &&
               set_diagonal_key(text, key, value, spec, law_given)) {
    } else if (spec.kind == ensembles::Kind::toeplitz && key == "coefficients") {
      for (const auto& v : split(value, ',')) spec.coefficients.push_back(parse_number(text, "coefficient", v));
    } else if (spec.kind == ensembles::Kind::jacobi && (key == "diagonal" || key == "off_diagonal")) {
      auto& list = key == "diagonal" ? spec.jacobi_diagonal : spec.jacobi_off_diagonal;
      for (const auto& v : split(value, ',')) list.push_back(parse_number(text, key, v));
    } else if (spec.kind == ensembles::Kind::toeplitz && key == "circulant") {
      if (value != "true" && value != "false") bad_declaration(text, "circulant must be true or false");
      spec.circulant = value == "true";
    } else {
      bad_declaration(text, "key '" + key + "' does not apply to " +
                                std::string(ensembles::kind_name(spec.kind)));
    }
  }
  if (spec.kind == ensembles::Kind::diagonal && !law_given && spec.diagonal.atoms.empty()) {
    bad_declaration(text, "a diagonal needs atoms=value@weight,... or law=...");
  }
  if (spec.kind == ensembles::Kind::diagonal && spec.diagonal.kind == DiagonalLawKind::spiked &&
      spec.diagonal.spikes.empty()) {
    bad_declaration(text, "law=spiked needs spikes=value,... (1 to " +
                              std::to_string(declarations::kMostSpikes) + " values)");
  }
  return spec;
}

SizeRunner::SizeRunner(const Model& model, Index n)
    : n_(n),
      samplers_(make_samplers(model)),
      used_(used_matrices(model)),
      expression_(model.expression, model.matrices, model.check),
      evaluation_(expression_, n, expr::EvaluationOptions{.full_haar = model.full_haar}),
      haar_columns_(evaluation_.haar_columns()) {
  if (n <= 0) throw InputError("size N must be positive (got " + std::to_string(n) + ")");
  const bool dense = model.force_dense || model.path == PathRequest::dense;
  // Both O(N) paths are decided from the job alone, never per rank: their random numbers differ
  // from the dense path's. The two-projection form: a·B + b·U B U^* + c of a two-valued diagonal
  // and a Haar matrix (two_projection_form); the tridiagonal form: a·X + b of one matrix whose
  // eigenvalue law has an exact tridiagonal model (Dumitriu & Edelman 2002).
  std::optional<tridiagonal::TwoProjectionSpec> two;
  if (!dense && model.path != PathRequest::tridiagonal) two = two_projection_form(expression_, n);
  double scale = 1.0, shift = 0.0;
  std::optional<tridiagonal::ModelSpec> tri = tridiagonal_form(model, scale, shift);
  choose_path(model, dense ? std::nullopt : tri, scale, shift, two);
}

std::optional<tridiagonal::ModelSpec> SizeRunner::tridiagonal_form(const Model& model,
                                                                   double& scale,
                                                                   double& shift) const {
  using ensembles::Kind;
  int letter = -1;
  double a = 0.0, b = 0.0;
  bool affine = true;
  for (const auto& m : expression_.expansion()) {
    if (m.coefficient.imag() != 0.0) {
      affine = false;  // a·X + b with complex a or b: not a real affine image
    } else if (m.letters.empty()) {
      b = m.coefficient.real();
    } else if (m.letters.size() == 1 && letter < 0) {
      letter = m.letters[0].first;
      a = m.coefficient.real();
    } else {
      affine = false;
    }
  }
  affine = affine && letter >= 0;
  const bool dense = model.force_dense || model.path == PathRequest::dense;
  for (std::size_t i = 0; i < model.matrices.size(); ++i) {
    const auto& spec = model.matrices[i];
    if (has_dense_sampler(spec.kind) || !used_[i]) continue;
    const std::string what = "matrix '" + spec.name + "' (" +
                             std::string(ensembles::kind_name(spec.kind)) + ")";
    if (!affine || letter != static_cast<int>(i)) {
      throw InputError(what + " has only a tridiagonal model, which gives the law of its "
                       "eigenvalues alone; use it alone or as a·" + spec.name + " + b");
    }
    if (dense) {
      throw InputError(what + " has no dense sampler, so the dense path cannot apply; compare "
                       "with gue or goe (β = 2, 1) or wishart_complex or wishart_real instead");
    }
    if (expression_.spectrum() != expr::Spectrum::eigenvalues) {
      throw InputError(what + ": singular values are not available on the tridiagonal path; "
                       "observe eigenvalues");
    }
  }
  if (!affine || expression_.spectrum() != expr::Spectrum::eigenvalues) return std::nullopt;
  const auto& x = model.matrices[static_cast<std::size_t>(letter)];
  tridiagonal::ModelSpec t;
  t.name = x.name;
  switch (x.kind) {
    case Kind::gue: t.family = tridiagonal::Family::hermite; t.beta = 2.0; break;
    case Kind::goe: t.family = tridiagonal::Family::hermite; t.beta = 1.0; break;
    case Kind::beta_hermite: t.family = tridiagonal::Family::hermite; t.beta = x.beta; break;
    case Kind::wishart_complex: t.family = tridiagonal::Family::laguerre; t.beta = 2.0; t.ratio = x.ratio; break;
    case Kind::wishart_real: t.family = tridiagonal::Family::laguerre; t.beta = 1.0; t.ratio = x.ratio; break;
    case Kind::beta_laguerre: t.family = tridiagonal::Family::laguerre; t.beta = x.beta; t.ratio = x.ratio; break;
    default: return std::nullopt;  // no tridiagonal model (Wigner ±1, Ginibre, Haar, diagonal)
  }
  tridiagonal::validate(t);
  scale = a;
  shift = b;
  return t;
}

namespace {

// Seconds to draw one used matrix's Gaussian entries: a Wigner matrix's N² (complex) or N²/2
// (real) normals, the same coefficients as the N² term of the dense prediction; a diagonal none.
double gaussian_seconds(const ensembles::MatrixSpec& m, double nn) {
  using ensembles::Kind;
  if (m.kind == Kind::diagonal) return 0.0;
  if (m.kind == Kind::toeplitz || m.kind == Kind::jacobi) return 1e-9 * nn * nn;  // writing N² doubles (common practice)
  if (m.kind == Kind::file_matrix) return (m.file.complex ? 4e-9 : 2e-9) * nn * nn;  // (A + A^*)/2
  const bool real = m.kind == Kind::goe || m.kind == Kind::wishart_real ||
                    m.kind == Kind::ginibre_real || m.kind == Kind::haar_orthogonal;
  return (real ? 3.8e-8 : 6.5e-8) * nn * nn;
}

// Seconds of a used matrix's factorisation when it is sampled: a Haar matrix's QR (×5 by the
// polar factor; `share` of it for a matrix drawn by share·N columns), a Wishart matrix's product.
double factorisation_seconds(const ensembles::MatrixSpec& m, double nn, double share) {
  using ensembles::Kind;
  const double cube = nn * nn * nn;
  const double polar = (m.haar == ensembles::HaarMethod::qr ? 1.0 : 5.0) * share;
  if (m.kind == Kind::haar_unitary) return 3.4e-10 * cube * polar;
  if (m.kind == Kind::haar_orthogonal) return 1.1e-10 * cube * polar;
  if (m.kind == Kind::wishart_complex) return 1.3e-10 * cube / m.ratio;
  if (m.kind == Kind::wishart_real) return 0.46e-10 * cube / m.ratio;
  return 0.0;
}

// The dense path's seconds beyond one Wigner matrix's sampling and the eigenvalue step: every
// further Wigner matrix's Gaussian entries; Haar samples by QR (2.7 s complex, 0.85 s real at
// N = 2000, tests/benchmarks/RESULTS.md; ×5 by the polar factor), a Haar matrix drawn by r of its
// columns (`columns`, −1: whole) costing r/N of a whole one (a thin QR); Wishart samples (1.07 s
// complex at N = 2000, c = 1, scaling as 1/c); and the evaluation: its flops at 50 GFlop/s plus
// 8e-8·N² per N×N product (measured 2026-12-05 for X1 X2 + X2 X1: the product ran at 16, 25, 34,
// 42 GFlop/s at N = 250, 500, 1000, 2000).
double dense_extra_seconds(const Model& model, const std::vector<bool>& used,
                           const std::vector<Index>& columns, Index n,
                           const expr::Evaluation* plan) {
  using ensembles::Kind;
  const double nn = static_cast<double>(n);
  double s = 0.0;
  if (plan != nullptr) {
    s += 2e-11 * plan->flops();
    for (const auto& step : plan->steps()) {
      if (step.kind == expr::StepKind::gemm || step.kind == expr::StepKind::herk ||
          step.kind == expr::StepKind::conjugate) {
        s += 8e-8 * nn * nn;
      }
    }
  }
  bool first_wigner = true;
  for (std::size_t i = 0; i < model.matrices.size(); ++i) {
    const auto& m = model.matrices[i];
    if (!used[i]) continue;
    const bool wigner = m.kind == Kind::gue || m.kind == Kind::goe;
    if (wigner && first_wigner) {
      first_wigner = false;  // counted by the dense prediction itself
    } else if (wigner) {
      s += gaussian_seconds(m, nn);
    }
    const double share = i < columns.size() && columns[i] >= 0
                             ? static_cast<double>(columns[i]) / nn
                             : 1.0;
    s += factorisation_seconds(m, nn, share);
  }
  return s;
}

// Seconds to sample the used matrices whole (for the Krylov path's prediction): every matrix's
// Gaussian entries, plus the Haar and Wishart factorisations.
double sample_seconds(const Model& model, const std::vector<bool>& used, Index n) {
  const double nn = static_cast<double>(n);
  double s = 0.0;
  for (std::size_t i = 0; i < model.matrices.size(); ++i) {
    if (!used[i]) continue;
    const auto& m = model.matrices[i];
    const bool haar = m.kind == ensembles::Kind::haar_unitary ||
                      m.kind == ensembles::Kind::haar_orthogonal;
    if (!haar) s += gaussian_seconds(m, nn);  // a Haar matrix's QR coefficient includes them
    s += factorisation_seconds(m, nn, 1.0);
  }
  return s;
}

std::string expr_bytes_text(double bytes) {
  char out[32];
  if (bytes >= 1024.0 * 1024.0 * 1024.0) {
    std::snprintf(out, sizeof out, "%.1f GiB", bytes / (1024.0 * 1024.0 * 1024.0));
  } else {
    std::snprintf(out, sizeof out, "%.1f MiB", bytes / (1024.0 * 1024.0));
  }
  return out;
}

std::string seconds_text(double s) {
  char out[32];
  std::snprintf(out, sizeof out, "%.3g s", s);
  return out;
}

// The message of a forced path that does not apply.
[[noreturn]] void refuse_forced(const char* forced, const std::string& why) {
  throw InputError(std::string("path = \"") + forced + "\" does not apply to this model: " + why +
                   "; remove path or set it to \"auto\" or \"dense\"");
}

}  // namespace

void SizeRunner::choose_path(const Model& model, std::optional<tridiagonal::ModelSpec> tri,
                             double scale, double shift,
                             std::optional<tridiagonal::TwoProjectionSpec> two) {
  const PathRequest want = model.force_dense ? PathRequest::dense : model.path;
  std::string krylov_why;
  const bool krylov = (want == PathRequest::automatic || want == PathRequest::krylov) &&
                      krylov_applies(model, krylov_why);
  if (want == PathRequest::tridiagonal && !tri) {
    refuse_forced("tridiagonal",
                  "the tridiagonal path computes a·X + b of one GUE, GOE, Wishart or β-ensemble "
                  "matrix, with eigenvalues observed");
  }
  if (want == PathRequest::two_projection && !two) {
    refuse_forced("two_projection",
                  "the two_projection path computes a·B + b·U B U^* (+ c) of a two-valued "
                  "diagonal B and a Haar U, with eigenvalues observed");
  }
  if (want == PathRequest::krylov && !krylov) refuse_forced("krylov", krylov_why);
  Path chosen = Path::dense;
  if (want != PathRequest::automatic) {
    path_choice_ = "forced by the job";
    chosen = want == PathRequest::tridiagonal      ? Path::tridiagonal
             : want == PathRequest::two_projection ? Path::two_projection
             : want == PathRequest::krylov         ? Path::krylov
                                                   : Path::dense;
  } else {
    chosen = cheapest_path(model, tri.has_value() || two.has_value(), two.has_value(), krylov);
  }
  if (chosen == Path::two_projection) {
    tridiagonal::validate(*two, n_);
    two_ = two;
  } else if (chosen == Path::tridiagonal) {
    tri_ = tri;
    tri_scale_ = scale;
    tri_shift_ = shift;
  } else if (chosen == Path::krylov) {
    krylov_.emplace(expression_, n_);
    krylov_settings_ = {model.krylov_tolerance, model.krylov_max_steps};
    // Products need every column of a Haar U; run() and spectrum_of() then use a plan for
    // whole samples too.
    haar_columns_.assign(haar_columns_.size(), -1);
    evaluation_ = expr::Evaluation(expression_, n_, expr::EvaluationOptions{.full_haar = true});
  }
}

Path SizeRunner::cheapest_path(const Model& model, bool linear, bool two, bool krylov) {
  // A matrix with only a tridiagonal model has no dense sampler.
  const bool has_dense = std::all_of(model.matrices.begin(), model.matrices.end(),
                                     [](auto& m) { return has_dense_sampler(m.kind); });
  std::vector<std::pair<Path, double>> options;  // listed O(N) path, dense, Krylov
  if (linear) {
    const Path fast = two ? Path::two_projection : Path::tridiagonal;
    options.emplace_back(fast, predicted_trial_seconds(fast, n_, model, false, 0.0));
  }
  if (has_dense) {
    options.emplace_back(Path::dense,
                         predicted_trial_seconds(Path::dense, n_, model, !expression_.is_real(),
                                                 dense_extra_seconds(model, used_, haar_columns_,
                                                                     n_, &evaluation_)));
  }
  if (krylov) {
    const expr::VectorProduct product(expression_, n_);
    options.emplace_back(Path::krylov,
                         predicted_krylov_seconds(n_, product.bytes_read(),
                                                  sample_seconds(model, used_, n_),
                                                  model.krylov_tolerance, model.krylov_max_steps));
  }
  if (options.size() == 1) {
    path_choice_ = has_dense ? "the only path that applies"
                             : "the only path that applies (no dense sampler)";
    return options.front().first;
  }
  predicted_ = "predicted CPU per trial:";
  for (const auto& [path, seconds] : options) {
    predicted_ += std::string(" ") + path_name(path) + " " + seconds_text(seconds) + ",";
  }
  predicted_.pop_back();
  path_choice_ = options.size() == 2 ? "the cheaper of the two that apply, by predicted cost per trial"
                                     : "the cheapest of those that apply, by predicted cost per trial";
  return std::min_element(options.begin(), options.end(),
                          [](auto& a, auto& b) { return a.second < b.second; })
      ->first;
}

bool SizeRunner::krylov_applies(const Model& model, std::string& why) const {
  why = "the krylov path finds only the smallest and largest eigenvalue (or singular value), so "
        "it needs observe.extremes_only = true and dense samples of every matrix";
  if (!model.extremes_only) return false;
  for (std::size_t i = 0; i < samplers_.size(); ++i) {
    if (used_[i] && !has_dense_sampler(samplers_[i].spec().kind)) return false;
  }
  if (expression_.spectrum() != expr::Spectrum::eigenvalues && model.path != PathRequest::krylov) {
    // Singular values by Lanczos on P^*P: the smallest one needs many steps when it is near 0
    // (a hard edge, e.g. a square Ginibre matrix), which no cost prediction can know in advance.
    why = "singular values go to the krylov path only when the job forces it (path = \"krylov\"): "
          "the smallest one can need many Lanczos steps";
    return false;
  }
  why.clear();
  return true;
}

double predicted_krylov_seconds(Index n, double bytes_per_product, double sample_seconds,
                                double tolerance, int max_steps) {
  // Lanczos steps to a relative error estimate of 1e-12 at square-root edges grow like N^(1/3)
  // (the relative gap at the edge shrinks like N^(-2/3)): 27, 34, 51, 60, 80, 96, 121 steps at
  // N = 60, 100, 250, 500, 1000, 2000, 4000 for X1 X2 + X2 X1 (measured 2026-12-05), about
  // 7.5·N^(1/3). Each step reads the samples once at memory speed (10.4–11 GB/s measured for
  // the products from N = 500 on), the basis twice (reorthogonalisation), and spends about
  // 20 µs on the tridiagonal eigenproblems and bookkeeping.
  // A looser tolerance saves a part of the steps: 33.8 against 41.1 on average at 1e-8 against
  // 1e-12 for the same model at N = 150 (tests/model/test_krylov_path.cpp prints both), about
  // 0.47 + 0.044·log10(1/tol) of the steps at 1e-12 (a two-point fit, used only to rank paths).
  const double nn = static_cast<double>(n);
  const double share = std::clamp(0.47 + 0.044 * std::log10(1.0 / tolerance), 0.3, 1.5);
  const double steps =
      std::min({nn, 7.5 * std::cbrt(nn) * share, static_cast<double>(std::max(max_steps, 1))});
  const double bandwidth = 1.05e10;
  return sample_seconds + steps * (bytes_per_product / bandwidth + 2e-5) +
         16.0 * nn * steps * steps / bandwidth;
}

double predicted_trial_seconds(Path path, Index n, const Model& model, bool complex_dense,
                               double extra_dense_seconds) {
  // Coefficients from CPU times of one trial measured on the development machine (2-core AMD
  // EPYC, one OpenBLAS thread, 2026-12-04; docs/performance.md §5b): a GUE and a GOE trial on
  // each path at N = 3 … 400 with 100 to 40,000 bins, and dsterf's time at N = 10⁵ (§5).
  const double nn = static_cast<double>(n);
  if (path == Path::dense) {
    // Sampling a Wigner matrix and the eigenvalue step (zheevd / dsyevd): a + b N² + c N³.
    return complex_dense ? 5e-6 + 6.5e-8 * nn * nn + 2.1e-10 * nn * nn * nn + extra_dense_seconds
                         : 4.5e-6 + 3.8e-8 * nn * nn + 1.5e-10 * nn * nn * nn + extra_dense_seconds;
  }
  const double edges = static_cast<double>(model.bins + 1);
  const double k = static_cast<double>(std::max(model.max_moment, 2));
  // Sturm counts: 2.5 ns per edge plus 0.445 ns per (row, edge); sampling and both extremes by
  // bisection ≈ 170 ns per row; moments ≈ 0.75 ns per row and K²; kept spectra by dsterf.
  return 5e-6 + edges * (2.5e-9 + 0.445e-9 * nn) + 170e-9 * nn + 0.75e-9 * k * k * nn +
         model.kept_share * 1.1e-8 * nn * nn;
}

std::string SizeRunner::sampler_changes() const {
  // One entry per used matrix whose sampler draws differently from format 1.3's (the paths
  // themselves are recorded apart, as /metadata path). Only the dense path samples matrices.
  std::string out;
  if (path() != Path::dense && path() != Path::krylov) return out;
  for (std::size_t i = 0; i < samplers_.size(); ++i) {
    if (!used_[i]) continue;
    const auto& spec = samplers_[i].spec();
    std::string change;
    if (haar_columns_[i] >= 0) {
      change = spec.haar == ensembles::HaarMethod::qr
                   ? "only the columns its conjugations read, by Cholesky QR (2r ≤ N) or a thin QR"
                   : "only the columns its conjugations read, by a thin polar factor";
    }
    const bool haar = spec.kind == ensembles::Kind::haar_unitary ||
                      spec.kind == ensembles::Kind::haar_orthogonal;
    if (change.empty() && haar && spec.haar == ensembles::HaarMethod::polar) {
      change = "polar factor by a scaled Newton step and an eigendecomposition (" +
               std::string(linalg::kPolarAlgorithm) + ")";
    }
    if (change.empty()) continue;
    out += (out.empty() ? "" : "; ") + spec.name + ": " + change;
  }
  return out;
}

const char* path_name(Path path) {
  switch (path) {
    case Path::tridiagonal: return "tridiagonal";
    case Path::two_projection: return "two_projection";
    case Path::krylov: return "krylov";
    case Path::dense: break;
  }
  return "dense";
}

namespace {

std::string text_of(double v) {
  char out[32];
  std::snprintf(out, sizeof out, "%g", v);
  return out;
}

std::string explain_two_projection(const expr::Expression& e, Index n,
                                   const tridiagonal::TwoProjectionSpec& t) {
  const auto c = tridiagonal::canonical(t, n);
  // c + s P + t U P U^*, each sign written once ("2 - 2 P - 2 U P U^*", not "2 + -2 P ...").
  const auto signed_term = [](double v) {
    char term[64];
    std::snprintf(term, sizeof term, "%s %g", v < 0 ? "-" : "+", std::abs(v));
    return std::string(term);
  };
  const std::string model = text_of(t.shift) + " " + signed_term(t.s) + " P " + signed_term(t.t) +
                            " U P U^*";
  char buf[900];
  std::snprintf(buf, sizeof buf,
                "expression: %s\nsize: N = %lld\npath: two_projection (%s "
                "with P of rank %lld and U Haar %s: the %lld x %lld corner of U from the "
                "beta-Jacobi model of Edelman & Sutton 2008, beta = %g, in a tridiagonal matrix "
                "with the same eigenvalues%s)\nobservations: histogram by Sturm counts at the bin "
                "edges, smallest and largest eigenvalue by bisection to 1e-10, moments from the "
                "band of T^j; no dense matrix and no spectrum\nmemory: O(N), about %.1f MiB\n",
                e.text().c_str(), static_cast<long long>(n), model.c_str(),
                static_cast<long long>(t.rank), t.beta == 2.0 ? "unitary" : "orthogonal",
                static_cast<long long>(c.rank), static_cast<long long>(c.rank), t.beta,
                c.rank == t.rank ? "" : "; the complementary projections, as 2k > N",
                48.0 * static_cast<double>(n) / (1024.0 * 1024.0));
  return buf;
}

}  // namespace

std::string SizeRunner::explain_krylov() const {
  const double n = static_cast<double>(n_);
  const double steps = std::min<double>(krylov_settings_.max_iterations, n);
  const double basis = (krylov_->is_real() ? 8.0 : 16.0) * n * (steps + 1);
  const bool gram = expression_.spectrum() != expr::Spectrum::eigenvalues;
  char buf[1000];
  std::snprintf(buf, sizeof buf,
                "expression: %s\nsize: N = %lld\narithmetic: %s\npath: krylov (Lanczos with full "
                "reorthogonalisation on products of the expression with vectors, one BLAS "
                "matrix-vector product per factor, %s read per product; the matrix is never "
                "formed)\nobservations: smallest and largest %s and the norm, to a relative "
                "error estimate of %g (Kato-Temple, r^2/gap) within %d steps, each trial's residuals "
                "stored as its certificate; a trial that does not converge is recorded as failed\n"
                "memory: the samples plus a Lanczos basis of at most %s\n",
                expression_.text().c_str(), static_cast<long long>(n_),
                krylov_->is_real() ? "real" : "complex",
                expr_bytes_text(krylov_->bytes_read()).c_str(),
                gram ? "singular value (Lanczos on P^*P: a product with P, then with P^*)"
                     : "eigenvalue",
                krylov_settings_.tolerance,
                krylov_settings_.max_iterations, expr_bytes_text(basis).c_str());
  return buf;
}

std::string SizeRunner::explain() const {
  const std::string predicted = predicted_.empty() ? "" : predicted_ + "\n";
  if (two_) return explain_two_projection(expression_, n_, *two_) + predicted;
  if (krylov_) return explain_krylov() + predicted;
  if (!tri_) return evaluation_.explain() + predicted;
  char buf[512];
  std::snprintf(buf, sizeof buf,
                "expression: %s\nsize: N = %lld\npath: tridiagonal (Dumitriu & Edelman 2002 %s "
                "model, beta = %g%s), scaled by %g and shifted by %g\nobservations: histogram by "
                "Sturm counts at the bin edges, smallest and largest eigenvalue by bisection to "
                "1e-10, moments from the band of T^j; no dense matrix and no spectrum\nmemory: "
                "O(N), about %.1f MiB\n",
                expression_.text().c_str(), static_cast<long long>(n_),
                tri_->family == tridiagonal::Family::hermite ? "beta-Hermite" : "beta-Laguerre",
                tri_->beta,
                tri_->family == tridiagonal::Family::laguerre
                    ? (", ratio c = " + std::to_string(tri_->ratio)).c_str()
                    : "",
                tri_scale_, tri_shift_, 48.0 * static_cast<double>(n_) / (1024.0 * 1024.0));
  return buf + predicted;
}

void SizeRunner::observe_trial(observe::Observations& obs, std::uint64_t seed,
                               std::uint64_t trial) const {
  if (krylov_) {
    observe_krylov_trial(obs, seed, trial);
    return;
  }
  if (!tri_ && !two_) {
    record(obs, run(seed, trial));
    return;
  }
  const auto exists = std::lower_bound(
      obs.trials.begin(), obs.trials.end(), trial,
      [](const observe::TrialRecord& r, std::uint64_t t) { return r.trial < t; });
  if (exists != obs.trials.end() && exists->trial == trial) {
    throw InputError("trial " + std::to_string(trial) + " is already recorded");
  }
  observe::TrialRecord row;
  if (two_) {
    row = tridiagonal::observe_two_projection_trial(*two_, n_, seed, trial, obs.config,
                                                    obs.histogram);
  } else {
    tridiagonal::TrialOptions options;
    options.scale = tri_scale_;
    options.shift = tri_shift_;
    row = tridiagonal::observe_tridiagonal_trial(*tri_, n_, seed, trial, obs.config,
                                                 obs.histogram, options);
  }
  const auto at = std::lower_bound(
      obs.trials.begin(), obs.trials.end(), trial,
      [](const observe::TrialRecord& r, std::uint64_t t) { return r.trial < t; });
  obs.trials.insert(at, std::move(row));
}

// Lanczos on P^*P found its extreme eigenvalues λ = σ²: the singular values σ = √λ, and bounds
// for them. P^*P has an eigenvalue s² within r of λ, so |s − σ| = |s² − σ²|/(s + σ) ≤ r/σ (∞ at
// σ = 0); the same for the error estimates, which bound |s² − λ| too.
linalg::LanczosResult singular_values_of_gram(linalg::LanczosResult r) {
  const auto root = [](double lambda) { return std::sqrt(std::max(lambda, 0.0)); };
  const auto bound = [](double residual, double sigma) {
    return sigma > 0.0 ? residual / sigma : std::numeric_limits<double>::infinity();
  };
  r.min = root(r.min);
  r.max = root(r.max);
  r.residual_min = bound(r.residual_min, r.min);
  r.residual_max = bound(r.residual_max, r.max);
  r.estimate_min = bound(r.estimate_min, r.min);
  r.estimate_max = bound(r.estimate_max, r.max);
  return r;
}

void SizeRunner::observe_krylov_trial(observe::Observations& obs, std::uint64_t seed,
                                      std::uint64_t trial) const {
  const std::vector<ensembles::Sample> samples = draw(seed, trial);
  // The start vector: a stream of its own, keyed like a matrix no job can declare (a name with a
  // space), so it never shares random numbers with a sample.
  rng::Stream stream({seed, "krylov start", static_cast<std::uint64_t>(n_), trial});
  const bool gram = expression_.spectrum() != expr::Spectrum::eigenvalues;  // singular values
  linalg::LanczosResult r;
  if (krylov_->is_real()) {
    Eigen::VectorXd start(n_);
    stream.fill_normal({start.data(), static_cast<std::size_t>(n_)});
    const linalg::RealApply apply = [&](const double* in, double* out) {
      gram ? krylov_->apply_gram(samples, in, out) : krylov_->apply(samples, in, out);
    };
    r = linalg::lanczos_extremes(n_, apply, std::move(start), krylov_settings_);
  } else {
    Eigen::VectorXcd start(n_);
    stream.fill_complex_normal({start.data(), static_cast<std::size_t>(n_)});
    const linalg::ComplexApply apply = [&](const std::complex<double>* in,
                                           std::complex<double>* out) {
      gram ? krylov_->apply_gram(samples, in, out) : krylov_->apply(samples, in, out);
    };
    r = linalg::lanczos_extremes(n_, apply, std::move(start), krylov_settings_);
  }
  if (gram) r = singular_values_of_gram(r);
  if (r.converged) {
    const double extremes[2] = {r.min, r.max};
    observe::record_trial(obs, trial, extremes);
  } else {
    observe::record_failure(obs, trial, r.reason);
  }
  auto row = std::lower_bound(
      obs.trials.begin(), obs.trials.end(), trial,
      [](const observe::TrialRecord& x, std::uint64_t t) { return x.trial < t; });
  row->certificate = {static_cast<double>(r.iterations), r.residual_min, r.residual_max,
                      r.estimate_min, r.estimate_max};
}

std::pair<double, double> SizeRunner::pilot_range(std::uint64_t seed, std::uint64_t trial) const {
  if (two_) {
    const auto x = tridiagonal::extremes(tridiagonal::sample(*two_, n_, seed, trial), 1e-10);
    return {x.min, x.max};
  }
  if (tri_) {
    const auto t = tridiagonal::affine(tridiagonal::sample(*tri_, n_, seed, trial), tri_scale_,
                                       tri_shift_);
    const auto x = tridiagonal::extremes(t, 1e-10);
    return {x.min, x.max};
  }
  const auto outcome = run(seed, trial);
  if (outcome.failed) throw NumericalError(outcome.reason);
  return {outcome.spectrum.minCoeff(), outcome.spectrum.maxCoeff()};
}

observe::SpectrumKind SizeRunner::spectrum_kind() const {
  return expression_.spectrum() == expr::Spectrum::eigenvalues
             ? observe::SpectrumKind::eigenvalues
             : observe::SpectrumKind::singular_values;
}

std::vector<ensembles::Sample> SizeRunner::draw(std::uint64_t seed, std::uint64_t trial) const {
  std::vector<ensembles::Sample> samples(samplers_.size());
  for (std::size_t i = 0; i < samplers_.size(); ++i) {
    if (!used_[i]) continue;
    // A Haar matrix the plan reads only by some columns is drawn as those columns alone
    // (expr::Evaluation::haar_columns): decided by the plan from the job and N, never per trial.
    const Index r = haar_columns_[i];
    samples[i] = r >= 0 ? samplers_[i].draw_columns(n_, r, seed, trial)
                        : samplers_[i].draw(n_, seed, trial);
  }
  return samples;
}

expr::MatrixView keep_copy(const expr::Evaluated& value, bool self_adjoint,
                           const MatrixBuffer& room) {
  // A self-adjoint matrix is diagonalised from its lower triangle (and a real diagonal), so the
  // copy's upper triangle is that triangle's mirror and its diagonal is real.
  const bool mirror = self_adjoint || value.lower_only;
  expr::MatrixView kept;
  kept.is_complex = value.is_complex;
  kept.rows = value.is_complex ? value.complex.rows() : value.real.rows();
  kept.cols = value.is_complex ? value.complex.cols() : value.real.cols();
  double* into = room(kept.doubles());
  kept.data = into;
  if (value.is_complex) {
    Eigen::Map<Eigen::MatrixXcd> copy(reinterpret_cast<std::complex<double>*>(into), kept.rows,
                                      kept.cols);
    copy = value.complex;
    if (mirror) linalg::mirror_lower(copy);
    if (self_adjoint) copy.diagonal().imag().setZero();
  } else {
    Eigen::Map<Eigen::MatrixXd> copy(into, kept.rows, kept.cols);
    copy = value.real;
    if (mirror) linalg::mirror_lower(copy);
  }
  return kept;
}

TrialOutcome SizeRunner::spectrum_of(std::uint64_t trial,
                                     const std::vector<ensembles::Sample>& samples,
                                     const MatrixBuffer& keep_matrix) const {
  TrialOutcome out;
  out.trial = trial;
  auto start = std::chrono::steady_clock::now();
  expr::Evaluated value = evaluation_.evaluate(samples);
  out.seconds.evaluate = seconds_since(start);
  // LAPACK on a matrix with NaN/Inf may loop, fail or return garbage: refuse it first (O(N²)).
  const bool finite = value.is_complex ? value.complex.allFinite() : value.real.allFinite();
  if (!finite) {
    out.failed = true;
    out.reason = "non-finite entry in the evaluated matrix";
    return out;
  }
  // The LAPACK routines overwrite their input: keep a copy first.
  if (keep_matrix) {
    out.matrix = keep_copy(value, evaluation_.spectrum() == expr::Spectrum::eigenvalues, keep_matrix);
  }
  start = std::chrono::steady_clock::now();
  try {
    out.spectrum = expr::compute_spectrum(evaluation_.spectrum(), value);
  } catch (const NumericalError& e) {
    out.failed = true;
    out.reason = e.what();
  }
  out.seconds.spectrum = seconds_since(start);
  return out;
}

TrialOutcome SizeRunner::run(std::uint64_t seed, std::uint64_t trial,
                              const MatrixBuffer& keep_matrix) const {
  const auto start = std::chrono::steady_clock::now();
  const auto samples = draw(seed, trial);
  const double sample_seconds = seconds_since(start);
  TrialOutcome out = spectrum_of(trial, samples, keep_matrix);
  out.seconds.sample = sample_seconds;
  return out;
}

void record(observe::Observations& obs, const TrialOutcome& outcome) {
  if (outcome.failed) {
    observe::record_failure(obs, outcome.trial, outcome.reason);
  } else {
    observe::record_trial(obs, outcome.trial,
                          {outcome.spectrum.data(), static_cast<std::size_t>(outcome.spectrum.size())});
  }
}

}  // namespace freegap::model
