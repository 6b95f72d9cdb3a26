// Fuzz target: profile JSON either fails validation with ProfileError or compiles into a model
// that decodes a short sequence to finite posteriors summing to 1.
#include <cmath>
#include <string_view>

#include "tidemark/decode.hpp"
#include "tidemark/error.hpp"
#include "tidemark/profile.hpp"

namespace {
struct Check : tidemark::DecodeSink {
    void block(const tidemark::BlockView& v) override {
        for (int64_t t = 0; t < v.size; ++t) {
            double sum = 0;
            for (int s = 0; s < v.states; ++s) {
                const double p = v.posterior[t * v.states + s];
                if (!std::isfinite(p) || p < -1e-12) __builtin_trap();
                sum += p;
            }
            if (std::abs(sum - 1) > 1e-9) __builtin_trap();
        }
    }
};
}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
    const std::string_view text(reinterpret_cast<const char*>(data), size);
    try {
        const tidemark::Profile p = tidemark::parse_profile(text, "fuzz");
        if (p.states.size() > 64) return 0;  // keep each run fast
        const tidemark::Model m = tidemark::compile(p);
        tidemark::Contig c;
        c.name = "f";
        for (uint8_t b : {0, 1, 2, 3, 4, 2, 1, 1, 2, 0, 3, 3, 2, 1}) c.push(b);
        tidemark::PosteriorDecoder dec(m, tidemark::DecoderOptions{4});
        Check sink;
        const auto r = dec.run(c, sink);
        if (!std::isfinite(r.log_likelihood)) __builtin_trap();
        tidemark::parse_profile(tidemark::to_json(p), "round trip");
    } catch (const tidemark::Error&) {
    }
    return 0;
}
