// Internal: a decompressing byte stream over a file or stdin, whatever its compression.
#pragma once

#include <cstddef>
#include <memory>
#include <string>

namespace tidemark::detail {

class ByteSource {
public:
    virtual ~ByteSource() = default;
    /// Reads up to n bytes; returns 0 at the end. Throws InputError on a read or
    /// decompression failure (e.g. a truncated gzip member).
    virtual size_t read(char* buf, size_t n) = 0;
    /// Moves to this offset of the uncompressed bytes (plain or bgzip with its .gzi index);
    /// false when the source cannot seek there.
    virtual bool seek(int64_t /*offset*/) { return false; }
};

/// Opens path ("-" = stdin), sniffing the compression from its first bytes.
std::unique_ptr<ByteSource> open_byte_source(const std::string& path);

}  // namespace tidemark::detail
