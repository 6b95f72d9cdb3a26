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

/// Opens path ("-" = stdin), sniffing the compression from its first bytes. A `sequential`
/// source is read from start to end without seek(): while decompression_threads() > 0, a
/// compressed one is decompressed ahead of the reader on a thread of its own.
std::unique_ptr<ByteSource> open_byte_source(const std::string& path, bool sequential = false);

/// Helper threads that decompression may use from now on (0 = decompress on the reading
/// thread). scan and fit allow one while they decode with more than one thread.
void set_decompression_threads(int threads);
int decompression_threads();

/// Sets the decompression threads for the lifetime of the object, then restores them.
class DecompressionThreads {
public:
    explicit DecompressionThreads(int threads) : before_(decompression_threads()) {
        set_decompression_threads(threads);
    }
    ~DecompressionThreads() { set_decompression_threads(before_); }
    DecompressionThreads(const DecompressionThreads&) = delete;
    DecompressionThreads& operator=(const DecompressionThreads&) = delete;

private:
    int before_;
};

}  // namespace tidemark::detail
