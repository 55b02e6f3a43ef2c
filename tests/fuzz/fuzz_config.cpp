// fuzz_config.cpp: libFuzzer target for the daemon's configuration reader (daemon/src/config.cpp): JSON with
// comments, every key checked. Any file gives a configuration or a ConfigError with a one-line message;
// a configuration that loads is valid.
#include <unistd.h>

#include <cstddef>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <string>

#include "pitchwire/daemon/config.h"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  static const std::string path = "/tmp/pitchwire-fuzz-config-" + std::to_string(::getpid()) + ".jsonc";
  if (std::FILE* f = std::fopen(path.c_str(), "wb")) {
    std::fwrite(data, 1, size, f);
    std::fclose(f);
  } else {
    return 0;
  }
  try {
    const pitchwire::daemon::DaemonConfig config = pitchwire::daemon::load_config_file(path);
    config.validate();  // the reader checks each value; settings that depend on each other are checked here
  } catch (const pitchwire::daemon::ConfigError& e) {
    const std::string message = e.what();
    if (message.empty() || message.find('\n') != std::string::npos) std::abort();  // one line, never empty
  }
  return 0;
}
