// The freegap executable: parses the command line and dispatches to the library (STYLE.md §1).
#include <CLI/CLI.hpp>
#include <iostream>

#include "freegap/errors.hpp"
#include "freegap/version.hpp"

int main(int argc, char** argv) {
  CLI::App app{"freegap: finite-N random matrices against their free-probability limits"};
  app.set_version_flag("--version", std::string(freegap::tool_version) + " (" +
                                        freegap::git_revision + ")");
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    return app.exit(e);
  }
  return 0;
}
