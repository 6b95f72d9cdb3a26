// Decodes the bases given as argv[2] with the built-in profile argv[1] through the installed
// library, and prints the log-likelihood, then per position the posterior of every state.
#include <cstdio>
#include <string>
#include <vector>

#include "tidemark/decode.hpp"
#include "tidemark/error.hpp"
#include "tidemark/profile.hpp"
#include "tidemark/sequence.hpp"

namespace {

class Collect final : public tidemark::DecodeSink {
public:
    void block(const tidemark::BlockView& view) override {
        rows.insert(rows.end(), view.posterior, view.posterior + view.size * view.states);
    }
    std::vector<double> rows;
};

}  // namespace

int main(int argc, char** argv) {
    if (argc != 3) {
        std::fprintf(stderr, "usage: consumer PROFILE BASES\n");
        return 2;
    }
    try {
        const tidemark::Profile profile = tidemark::load_profile(argv[1]);
        const tidemark::Model model = tidemark::compile(profile);
        tidemark::Contig contig;
        contig.name = "consumer";
        tidemark::contig_from_text(argv[2], contig);
        tidemark::PosteriorDecoder decoder(model);
        Collect sink;
        const tidemark::DecodeResult result = decoder.run(contig, sink);
        std::printf("%.17g\n", result.log_likelihood);
        for (int64_t t = 0; t < contig.length; ++t) {
            for (int s = 0; s < model.states; ++s)
                std::printf("%s%.17g", s ? "\t" : "", sink.rows[t * model.states + s]);
            std::printf("\n");
        }
    } catch (const tidemark::Error& e) {
        std::fprintf(stderr, "consumer: error: %s\n", e.what());
        return 1;
    }
    return 0;
}
