// demo.h: `pitchwire demo`: tracks the built-in test voice and prints a readable summary.
#pragma once

#include <optional>
#include <string>

namespace pitchwire::cli {

struct DemoOptions {
  std::optional<std::string> csv_path;  // also write the settled frames here (the analyze CSV format)
};

// Exit codes: 0 done, 1 the CSV file or stdout could not be written.
int run_demo(const DemoOptions& options);

}  // namespace pitchwire::cli
