// Fuzz target: the BED reader returns well-formed intervals or throws InputError.
#include "fuzz_util.hpp"
#include "tidemark/error.hpp"
#include "tidemark/intervals.hpp"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
    tidemark::fuzz::MemoryFile file(data, size);
    try {
        for (const auto& iv : tidemark::read_bed(file.path()))
            if (iv.begin < 0 || iv.end < iv.begin || iv.chrom.empty()) __builtin_trap();
    } catch (const tidemark::Error&) {
    }
    return 0;
}
