// BED lines for calls and bedGraph posterior tracks.
#include "tidemark/track.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>

#include "tidemark/error.hpp"

namespace tidemark {

std::string format_bed_header(const std::string& profile_name, const std::string& command_line) {
    std::string out = fmt::format("#tidemark {} calls, profile {}\n", TIDEMARK_VERSION, profile_name);
    out += "#command: " + command_line + "\n#";
    for (size_t i = 0; i < std::size(bed_columns); ++i) {
        if (i) out += '\t';
        out += bed_columns[i];
    }
    out += '\n';
    return out;
}

std::string format_bed_line(const Contig& contig, const Call& call, const std::string& region_name) {
    const double oe = call.composition.cpg_obs_exp();
    const long score = std::lround(std::clamp(call.mean_posterior, 0.0, 1.0) * 1000.0);
    return fmt::format("{}\t{}\t{}\t{}\t{}\t.\t{:.4f}\t{:.4f}\t{:.4f}\t{}\n", contig.name,
                       contig.offset + call.begin, contig.offset + call.end, region_name, score,
                       call.mean_posterior, call.min_posterior, call.composition.gc_fraction(),
                       std::isnan(oe) ? std::string("NA") : fmt::format("{:.4f}", oe));
}

PosteriorTracks::PosteriorTracks(const Model& model, const std::string& prefix, int digits)
    : model_(model), digits_(digits), scale_(std::pow(10.0, digits)) {
    if (digits < 0 || digits > 12) throw UsageError("--posterior-digits must be from 0 to 12");
    for (size_t r = 0; r < model.region_names.size(); ++r) {
        if (!model.region_report[r]) continue;
        Track t;
        t.region = static_cast<int>(r);
        t.file = std::make_unique<OutputFile>(prefix + "." + model.region_names[r] + ".bedgraph");
        tracks_.push_back(std::move(t));
    }
}

std::vector<std::string> PosteriorTracks::paths() const {
    std::vector<std::string> out;
    for (const auto& t : tracks_) out.push_back(t.file->path());
    return out;
}

void PosteriorTracks::begin_contig(const Contig& contig) {
    contig_ = &contig;
    for (auto& t : tracks_) t.run_value = -1;
}

void PosteriorTracks::flush_run(Track& t) {
    if (t.run_value < 0) return;
    t.buffer += fmt::format("{}\t{}\t{}\t{:.{}f}\n", contig_->name, contig_->offset + t.run_begin,
                            contig_->offset + t.run_end, static_cast<double>(t.run_value) / scale_,
                            digits_);
    t.run_value = -1;
    if (t.buffer.size() > (1 << 20)) {
        t.file->write(t.buffer);
        t.buffer.clear();
    }
}

void PosteriorTracks::block(const BlockView& view) {
    const int S = view.states;
    for (auto& t : tracks_) {
        for (int64_t i = 0; i < view.size; ++i) {
            double p = 0;
            for (int s = 0; s < S; ++s)
                if (model_.region_of_state[s] == t.region) p += view.posterior[i * S + s];
            const int64_t q = std::llround(std::clamp(p, 0.0, 1.0) * scale_);
            const int64_t pos = view.begin + i;
            if (q == t.run_value) {
                t.run_end = pos + 1;
            } else {
                flush_run(t);
                t.run_value = q;
                t.run_begin = pos;
                t.run_end = pos + 1;
            }
        }
    }
}

void PosteriorTracks::end_contig(const Contig&, const DecodeResult&) {
    for (auto& t : tracks_) flush_run(t);
}

void PosteriorTracks::close() {
    for (auto& t : tracks_) {
        t.file->write(t.buffer);
        t.buffer.clear();
        t.file->commit();
    }
}

}  // namespace tidemark
