// Internal: classification of sequence bytes (bases, IUPAC ambiguity codes, whitespace, illegal).
#pragma once

#include <array>
#include <cstdint>
#include <string>

#include "tidemark/sequence.hpp"

namespace tidemark::detail {

enum ByteClass : uint8_t {
    // 0..4 are base codes (A C G T unknown); values below mark non-base bytes.
    byte_space = 5,  ///< space or tab inside a sequence line: skipped
    byte_illegal = 6,
};

/// Upper or lower case A C G T map to their codes; N and the IUPAC ambiguity codes
/// R Y S W K M B D H V to unknown; space and tab are skipped; everything else is illegal.
inline const std::array<uint8_t, 256>& byte_classes() {
    static const std::array<uint8_t, 256> table = [] {
        std::array<uint8_t, 256> t{};
        t.fill(byte_illegal);
        const auto set = [&t](char ch, uint8_t v) {
            t[static_cast<unsigned char>(ch)] = v;
            t[static_cast<unsigned char>(ch - 'A' + 'a')] = v;
        };
        set('A', 0);
        set('C', 1);
        set('G', 2);
        set('T', 3);
        for (char ch : std::string("NRYSWKMBDHV")) set(ch, 4);
        t[' '] = byte_space;
        t['\t'] = byte_space;
        return t;
    }();
    return table;
}

inline bool is_lower_base(unsigned char ch) {
    return ch >= 'a' && ch <= 'z';
}

/// The one place where a sequence byte becomes a base code, for every reader: code 0..4 plus
/// lowercase_flag for a lowercase letter, or not_a_base (space, tab, line ends, illegal bytes;
/// the caller tells them apart with byte_classes). With SoftMasked::unknown a lowercase base is
/// unknown (code 4). One lookup per byte in the readers' inner loops.
constexpr uint8_t lowercase_flag = 8;
constexpr uint8_t not_a_base = 16;
inline const std::array<uint8_t, 256>& sequence_codes(SoftMasked soft) {
    static const auto make = [](SoftMasked mode) {
        std::array<uint8_t, 256> t{};
        const auto& classes = byte_classes();
        for (int ch = 0; ch < 256; ++ch) {
            const uint8_t cls = classes[ch];
            const bool lower = is_lower_base(static_cast<unsigned char>(ch));
            const uint8_t code = lower && mode == SoftMasked::unknown ? uint8_t{base_unknown} : cls;
            t[ch] = cls <= base_unknown ? static_cast<uint8_t>(code | (lower ? lowercase_flag : 0))
                                        : not_a_base;
        }
        return t;
    };
    static const std::array<uint8_t, 256> as_base = make(SoftMasked::base);
    static const std::array<uint8_t, 256> as_unknown = make(SoftMasked::unknown);
    return soft == SoftMasked::unknown ? as_unknown : as_base;
}

/// Printable rendering of a byte for error messages: 'x' or byte 0x1F.
inline std::string describe_byte(unsigned char ch) {
    static const char* hex = "0123456789ABCDEF";
    std::string hx = std::string("byte 0x") + hex[ch >> 4] + hex[ch & 15];
    if (ch >= 0x21 && ch < 0x7F)
        return "'" + std::string(1, static_cast<char>(ch)) + "' (" + hx + ")";
    return hx;
}

}  // namespace tidemark::detail
