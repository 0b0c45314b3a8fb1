# The run-file reader's libFuzzer target (tests/fuzz/fuzz_run_file.cpp). Include this from
# tests/fuzz/CMakeLists.txt in a build configured with clang (libFuzzer needs
# -fsanitize=fuzzer; Debian: clang-14 and libclang-rt-14-dev), after freegap::core exists:
#
#   include(${CMAKE_CURRENT_SOURCE_DIR}/run_file.cmake)
#
# Run it on a seed corpus of small run files, for example:
#
#   mkdir -p corpus && build-fuzz/freegap run job.toml -q -o corpus/seed.h5
#   build-fuzz/tests/fuzz/fuzz_run_file -max_total_time=120 -timeout=20 -rss_limit_mb=4096 corpus
#
# Each input is checked in a forked child (store::verify), so one input costs a fork and a few
# milliseconds; -timeout must exceed the child's stall limit (60 s by default: run with
# FREEGAP_CHECK_STALL_SECONDS=5).
add_executable(fuzz_run_file ${CMAKE_CURRENT_LIST_DIR}/fuzz_run_file.cpp)
target_link_libraries(fuzz_run_file PRIVATE freegap::core ${HDF5_LIBRARIES})
target_include_directories(fuzz_run_file PRIVATE ${HDF5_INCLUDE_DIRS})
target_compile_options(fuzz_run_file PRIVATE -fsanitize=fuzzer)
target_link_options(fuzz_run_file PRIVATE -fsanitize=fuzzer)
