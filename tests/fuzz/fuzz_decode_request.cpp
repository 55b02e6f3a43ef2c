// fuzz_decode_request.cpp: libFuzzer target for the protocol decoder (protocol/src/decode.cpp), the code
// that reads every client message. Any input must give a Request or an Error, never a crash, a hang or
// undefined behaviour; an Error's text names the problem (non-empty).
#include <cstddef>
#include <cstdint>
#include <cstdlib>
#include <string_view>
#include <variant>

#include "pitchwire/protocol/decode.h"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string_view text(reinterpret_cast<const char*>(data), size);
  const pitchwire::protocol::Decoded decoded = pitchwire::protocol::decode_request(text);
  if (const auto* error = std::get_if<pitchwire::protocol::Error>(&decoded); error && error->message.empty()) {
    std::abort();  // every refusal must say why
  }
  return 0;
}
