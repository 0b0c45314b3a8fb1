// Fuzz target: job file text → the validated job, as `freegap run` validates it before any
// work (TOML, every key, the matrices' samplers, the expression, each size's evaluation plan),
// with the file system left alone: no eigenvalue file or plug-in library is read, nothing is
// loaded or written. Any exception other than an InputError is a failure.
#include <cstddef>
#include <cstdint>
#include <string_view>

#include "freegap/expr.hpp"
#include "freegap/job.hpp"
#include "fuzz_common.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string_view text(reinterpret_cast<const char*>(data), size);
  try {
    // A directory that does not exist anchors relative paths; read_files = false keeps absolute
    // ones ("/dev/zero") unread too.
    const auto job = freegap::job::parse_job(text, "/nonexistent-fuzz-dir/job.toml",
                                             /*read_estimator_libraries=*/false,
                                             freegap::job::Paths::anywhere,
                                             /*read_files=*/false);
    (void)job.canonical();
    (void)job.hash();
    auto check = freegap::fuzz::check_options();
    check.force_singular_values = job.observe.singular_values;
    const freegap::expr::Expression expression(job.expression, job.matrices, check);
    for (const auto n : job.sizes) {
      const freegap::expr::Evaluation plan(expression, n);
      (void)plan.flops();
    }
  } catch (const freegap::expr::ExprError& e) {
    freegap::fuzz::check_expr_error(e);
  } catch (const freegap::InputError&) {
    // refused with a message: what bad input should get
  }
  return 0;
}
