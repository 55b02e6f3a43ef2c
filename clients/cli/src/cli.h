// cli.h: the `pitchwire` command line (subcommands analyze, demo, report, watch, tail, mark, band, exercise,
// reference, --help, --version).
#pragma once

namespace pitchwire::cli {

// Parses the arguments and runs the chosen subcommand. Returns the process exit code:
// 0 success, 1 output could not be written (or, for report, the session could not be read), 2 usage error or
// bad input.
int run(int argc, char** argv);

}  // namespace pitchwire::cli
