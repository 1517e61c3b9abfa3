// SHA-256 (FIPS 180-4, "Secure Hash Standard", section 6.2) of a byte string, as the hex digest
// `sha256sum` prints: how `sprig bench` names the content of an input file.
#pragma once

#include <string>
#include <string_view>

namespace sprig::cli {

// 64 lower-case hex digits.
std::string Sha256Hex(std::string_view bytes);

}  // namespace sprig::cli
