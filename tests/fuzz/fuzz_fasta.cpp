// Fuzz target: the streaming FASTA reader (any compression) must either read records whose
// bases round-trip or throw InputError; never crash, hang or leak.
#include "fuzz_util.hpp"
#include "tidemark/error.hpp"
#include "tidemark/sequence.hpp"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
    tidemark::fuzz::MemoryFile file(data, size);
    try {
        auto source = tidemark::open_fasta(file.path());
        tidemark::Contig contig;
        while (source->next(contig)) {
            int64_t unknown = 0;
            for (const auto& r : contig.unknown) unknown += r.length;
            if (unknown > contig.length) __builtin_trap();
            const auto comp = tidemark::composition(contig, 0, contig.length);
            if (comp.known() + comp.unknown != contig.length) __builtin_trap();
        }
    } catch (const tidemark::Error&) {
    }
    return 0;
}
