# Writes the git revision of SOURCE_DIR into OUTPUT, a C++ source, at every build (and once at
# configure time), touching OUTPUT only when the text changes: a commit after configuring gets
# its own revision in every run file without re-running cmake, and rebuilds only this file.
# A checkout with uncommitted changes to tracked files is marked "-modified".
execute_process(COMMAND git rev-parse --short=12 HEAD
                WORKING_DIRECTORY ${SOURCE_DIR}
                OUTPUT_VARIABLE revision OUTPUT_STRIP_TRAILING_WHITESPACE
                RESULT_VARIABLE status ERROR_QUIET)
if(NOT status EQUAL 0 OR NOT revision)
  set(revision "unknown")
else()
  execute_process(COMMAND git status --porcelain --untracked-files=no
                  WORKING_DIRECTORY ${SOURCE_DIR}
                  OUTPUT_VARIABLE changes OUTPUT_STRIP_TRAILING_WHITESPACE
                  RESULT_VARIABLE status ERROR_QUIET)
  if(status EQUAL 0 AND changes)
    string(APPEND revision "-modified")
  endif()
endif()
set(text "// Generated at build time by src/revision.cmake.\n#include \"freegap/version.hpp\"\n\nnamespace freegap {\nconst char* const git_revision = \"${revision}\";\n}  // namespace freegap\n")
if(EXISTS ${OUTPUT})
  file(READ ${OUTPUT} old)
endif()
if(NOT old STREQUAL text)
  file(WRITE ${OUTPUT} "${text}")
endif()
