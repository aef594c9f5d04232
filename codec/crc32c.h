// CRC-32C (Castagnoli), the packet integrity check (codec/FORMAT.md §2).
// Parameters as catalogued under the name CRC-32/ISCSI: width 32, poly 0x1edc6f41,
// init 0xffffffff, refin/refout true, xorout 0xffffffff, check 0xe3069283.
// Thread-safety: pure functions.
#pragma once

#include <cstddef>
#include <cstdint>
#include <span>

namespace tarn::codec {

// CRC-32C of `data`. crc32c({"123456789"}) == 0xe3069283.
std::uint32_t crc32c(std::span<const std::uint8_t> data);

}  // namespace tarn::codec
