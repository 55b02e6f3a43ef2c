// number_text.h: numbers as text for the wire and for files, without locale: std::to_chars with a fixed
// number of decimals and a full stop. Shared by the protocol encoder and `pitchwire analyze`.
//
// Thread contract: any thread; no shared state.
#pragma once

#include <optional>
#include <string>
#include <string_view>

namespace pitchwire::protocol {

// Appends value with `decimals` decimals, or `missing` when the value is absent or not finite.
void append_fixed(std::string& out, std::optional<double> value, int decimals, std::string_view missing = "null");

// A float that may be absent, as a double that may be absent.
[[nodiscard]] inline std::optional<double> widen(const std::optional<float>& v) {
  return v ? std::optional<double>(static_cast<double>(*v)) : std::nullopt;
}

}  // namespace pitchwire::protocol
