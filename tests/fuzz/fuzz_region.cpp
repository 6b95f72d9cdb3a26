// Fuzz target: region strings against a fixed indexed FASTA resolve to in-range regions or
// throw InputError.
#include <unistd.h>

#include <cstdio>
#include <cstdlib>
#include <string>

#include "tidemark/error.hpp"
#include "tidemark/sequence.hpp"

namespace {
const std::string& indexed_fasta() {
    static const std::string path = [] {
        char dir[] = "/tmp/tidemark-fuzz-XXXXXX";
        const std::string d = mkdtemp(dir);
        const std::string p = d + "/ref.fa";
        std::FILE* f = std::fopen(p.c_str(), "w");
        std::fputs(">chr1 first\nACGTACGTAC\nGTACG\n>chr1:5-9\nAAAA\n>x\nNNNNNNNNNNNNNNNNNNNN\n",
                   f);
        std::fclose(f);
        return p;
    }();
    return path;
}
}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
    const std::string text(reinterpret_cast<const char*>(data), size);
    try {
        for (const auto& r : tidemark::resolve_regions(indexed_fasta(), {text}, {}))
            if (r.begin < 0 || r.end <= r.begin || r.end > 20) __builtin_trap();
    } catch (const tidemark::Error&) {
    }
    return 0;
}
