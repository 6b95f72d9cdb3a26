// Training data: FASTA files or faidx regions re-read on every pass, or contigs in memory.
#include <fmt/format.h>

#include "tidemark/error.hpp"
#include "tidemark/train.hpp"

namespace tidemark {

FastaTrainingData::FastaTrainingData(std::vector<std::string> inputs,
                                     const std::vector<std::string>& regions,
                                     const std::string& regions_bed, SoftMasked soft_masked)
    : inputs_(std::move(inputs)), soft_masked_(soft_masked) {
    if (inputs_.empty()) throw UsageError("fit needs at least one FASTA file");
    for (const auto& in : inputs_)
        if (in == "-")
            throw UsageError(
                "fit reads its input once per iteration, so it cannot read standard "
                "input (-); write the sequences to a file first");
    if (!regions.empty() || !regions_bed.empty()) {
        if (inputs_.size() != 1)
            throw UsageError("--region and --regions-bed take exactly one indexed FASTA file");
        const std::vector<Interval> bed =
            regions_bed.empty() ? std::vector<Interval>{} : read_bed(regions_bed);
        regions_ = resolve_regions(inputs_[0], regions, bed);
    }
}

void FastaTrainingData::for_each(const std::function<void(const Contig&)>& fn) {
    std::vector<SequenceRecord> seen;
    for (const auto& input : inputs_) {
        std::unique_ptr<SequenceSource> source =
            regions_.empty() ? open_fasta(input) : open_regions(input, regions_);
        source->set_soft_masked(soft_masked_);
        while (source->next(contig_)) {
            if (!recorded_)
                seen.push_back(
                    {input, contig_.name, contig_.offset, contig_.length, contig_.unknown_count()});
            fn(contig_);
        }
    }
    if (!recorded_) {
        records_ = std::move(seen);
        recorded_ = true;
    }
}

void MemoryTrainingData::for_each(const std::function<void(const Contig&)>& fn) {
    for (const auto& c : contigs_) fn(c);
}

}  // namespace tidemark
