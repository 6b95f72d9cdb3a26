// Benchmark baseline: the textbook HMM posterior decoder, written the obvious way, to measure
// tidemark against. Not part of tidemark and not built by its CMake project.
//
// What "obvious" means here: the sequence is read into one byte per base, the forward pass keeps
// every normalised forward vector (N x S doubles), each step divides by the vector's sum and adds
// its log (per-base normalisation as in Rabiner 1989, "A tutorial on hidden Markov models and
// selected applications in speech recognition", Proc. IEEE 77:257-286, section V.A), emissions
// are looked up from the profile's order-0/1 tables at each use, and the backward pass turns the
// stored forward vectors into posteriors in place. Calling is the same rule as tidemark's
// (runs of P(region) >= threshold, runs closer than merge_gap merged, calls shorter than
// min_length dropped) and the BED columns are the same, so the two outputs can be compared.
#include <zlib.h>

#include <cerrno>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstring>
#include <fstream>
#include <map>
#include <nlohmann/json.hpp>
#include <stdexcept>
#include <string>
#include <vector>

namespace {

using nlohmann::json;

struct Model {
    int S = 0;
    std::vector<std::string> state_names;
    std::vector<int> region;  // region of each state
    std::vector<std::string> region_names;
    std::vector<bool> report;
    std::vector<int> order;                     // 0 or 1
    std::vector<std::vector<double>> emission;  // [state][row * 4 + base]; last row = mean row
    std::vector<double> initial;                // S
    std::vector<double> A;                      // S x S, [from * S + to]
    double min_posterior = 0.5;
    int64_t min_length = 1, merge_gap = 0;
};

Model load_model(const std::string& path) {
    std::ifstream in(path);
    if (!in) throw std::runtime_error(path + ": cannot open profile");
    const json j = json::parse(in);
    Model m;
    std::map<std::string, int> region_index, state_index;
    for (const auto& r : j.at("regions")) {
        region_index[r.at("name")] = static_cast<int>(m.region_names.size());
        m.region_names.push_back(r.at("name"));
        m.report.push_back(r.value("report", false));
    }
    for (const auto& s : j.at("states")) {
        const int k = s.at("order");
        if (k > 1)
            throw std::runtime_error(path + ": the baseline handles emission orders 0 and 1 only");
        state_index[s.at("name")] = m.S++;
        m.state_names.push_back(s.at("name"));
        m.region.push_back(region_index.at(s.at("region")));
        m.order.push_back(k);
        std::vector<double> table;
        double mean[4] = {0, 0, 0, 0};
        const auto& rows = s.at("emissions");
        for (const auto& row : rows)
            for (int b = 0; b < 4; ++b) {
                table.push_back(row.at(b));
                mean[b] += row.at(b).get<double>() / static_cast<double>(rows.size());
            }
        // Where the preceding base is unknown (or at the contig start) the state uses the mean of
        // its rows, the same convention as tidemark's compiled profiles.
        for (double v : mean) table.push_back(v);
        m.emission.push_back(table);
    }
    m.initial.assign(m.S, 0.0);
    m.A.assign(static_cast<size_t>(m.S) * m.S, 0.0);
    for (const auto& [name, p] : j.at("initial").items()) m.initial[state_index.at(name)] = p;
    for (const auto& [from, row] : j.at("transitions").items())
        for (const auto& [to, p] : row.items())
            m.A[state_index.at(from) * m.S + state_index.at(to)] = p;
    if (j.contains("calling")) {
        const auto& c = j["calling"];
        m.min_posterior = c.value("min_posterior", m.min_posterior);
        m.min_length = c.value("min_length", m.min_length);
        m.merge_gap = c.value("merge_gap", m.merge_gap);
    }
    return m;
}

struct Record {
    std::string name;
    std::vector<uint8_t> seq;  // 0..3 = A C G T, 4 = unknown
};

// Reads FASTA records one at a time (gzip or plain: zlib reads both).
class FastaReader {
public:
    explicit FastaReader(const std::string& path) : path_(path) {
        f_ = gzopen(path.c_str(), "rb");
        if (!f_) throw std::runtime_error(path + ": cannot open: " + std::strerror(errno));
        gzbuffer(f_, 1 << 20);
        for (int c = 0; c < 256; ++c) code_[c] = 255;
        const char* bases = "ACGT";
        for (int b = 0; b < 4; ++b) {
            code_[static_cast<unsigned char>(bases[b])] = static_cast<uint8_t>(b);
            code_[static_cast<unsigned char>(bases[b] + 32)] = static_cast<uint8_t>(b);
        }
        for (const char* p = "NRYSWKMBDHV"; *p; ++p) {
            code_[static_cast<unsigned char>(*p)] = 4;
            code_[static_cast<unsigned char>(*p + 32)] = 4;
        }
    }
    ~FastaReader() { gzclose(f_); }

    bool next(Record& r) {
        if (pending_.empty()) {
            if (!read_line()) return false;
            if (line_[0] != '>')
                throw std::runtime_error(path_ + ": does not start with a '>' header");
            pending_ = line_;
        }
        r.name = pending_.substr(1, pending_.find_first_of(" \t\r\n") - 1);
        r.seq.clear();
        pending_.clear();
        while (read_line()) {
            if (line_[0] == '>') {
                pending_ = line_;
                break;
            }
            for (unsigned char ch : line_) {
                if (ch == '\n' || ch == '\r' || ch == ' ' || ch == '\t') continue;
                if (code_[ch] == 255)
                    throw std::runtime_error(path_ + ": illegal character in " + r.name);
                r.seq.push_back(code_[ch]);
            }
        }
        return true;
    }

private:
    bool read_line() {
        line_.clear();
        for (;;) {
            if (!gzgets(f_, buf_, sizeof buf_)) return !line_.empty();
            line_ += buf_;
            if (!line_.empty() && line_.back() == '\n') return true;
        }
    }

    std::string path_;
    gzFile f_;
    char buf_[4096];
    std::string line_, pending_;
    uint8_t code_[256];
};

// P(base at t | state s), with the unknown-base and missing-context conventions.
double emit(const Model& m, int s, const std::vector<uint8_t>& seq, int64_t t) {
    const uint8_t b = seq[t];
    if (b == 4) return 1.0;
    int row = 0;
    if (m.order[s] == 1) row = (t > 0 && seq[t - 1] < 4) ? seq[t - 1] : 4;
    return m.emission[s][row * 4 + b];
}

struct Call {
    int64_t begin, end;
    double sum;
    int64_t confident;  // bases with P >= 0.95 (tidemark's default --core-posterior)
};

std::string bed_line(const std::string& chrom, const Record& r, const Call& c,
                     const std::string& region) {
    int64_t n[5] = {0, 0, 0, 0, 0}, cpg = 0;
    for (int64_t i = c.begin; i < c.end; ++i) {
        ++n[r.seq[i]];
        if (i + 1 < c.end && r.seq[i] == 1 && r.seq[i + 1] == 2) ++cpg;
    }
    const int64_t known = n[0] + n[1] + n[2] + n[3];
    const double gc = known ? static_cast<double>(n[1] + n[2]) / static_cast<double>(known) : 0.0;
    char oe[32] = "NA";
    if (n[1] > 0 && n[2] > 0)
        std::snprintf(oe, sizeof oe, "%.4f",
                      static_cast<double>(cpg) * static_cast<double>(known) /
                          (static_cast<double>(n[1]) * static_cast<double>(n[2])));
    const double mean = c.sum / static_cast<double>(c.end - c.begin);
    char line[512];
    std::snprintf(line, sizeof line, "%s\t%lld\t%lld\t%s\t%ld\t.\t%.4f\t%.4f\t%.4f\t%s\n",
                  chrom.c_str(), static_cast<long long>(c.begin), static_cast<long long>(c.end),
                  region.c_str(), std::lround(std::fmin(std::fmax(mean, 0.0), 1.0) * 1000.0), mean,
                  static_cast<double>(c.confident) / static_cast<double>(c.end - c.begin), gc, oe);
    return line;
}

}  // namespace

int main(int argc, char** argv) {
    std::string profile_path, fasta, output = "-", posteriors;
    for (int i = 1; i < argc; ++i) {
        const std::string a = argv[i];
        if (a == "--profile" && i + 1 < argc)
            profile_path = argv[++i];
        else if (a == "-o" && i + 1 < argc)
            output = argv[++i];
        else if (a == "--posteriors" && i + 1 < argc)
            posteriors = argv[++i];
        else if (a[0] != '-' && fasta.empty())
            fasta = a;
        else {
            std::fprintf(stderr,
                         "usage: baseline --profile JSON [-o BED] [--posteriors TSV] FASTA\n");
            return 2;
        }
    }
    if (profile_path.empty() || fasta.empty()) {
        std::fprintf(stderr, "usage: baseline --profile JSON [-o BED] [--posteriors TSV] FASTA\n");
        return 2;
    }
    try {
        const Model m = load_model(profile_path);
        const int S = m.S;
        FILE* out = output == "-" ? stdout : std::fopen(output.c_str(), "w");
        FILE* post = posteriors.empty() ? nullptr : std::fopen(posteriors.c_str(), "w");
        if (!out || (!posteriors.empty() && !post))
            throw std::runtime_error("cannot create output files");
        FastaReader reader(fasta);
        Record r;
        std::vector<double> alpha, beta(S), next(S);
        while (reader.next(r)) {
            const int64_t N = static_cast<int64_t>(r.seq.size());
            if (N == 0) continue;
            alpha.assign(static_cast<size_t>(N) * S, 0.0);

            // Forward, normalising every position and summing the logs of the normalisers.
            double loglik = 0;
            for (int64_t t = 0; t < N; ++t) {
                double* a = &alpha[t * S];
                double sum = 0;
                for (int j = 0; j < S; ++j) {
                    double v = 0;
                    if (t == 0) {
                        v = m.initial[j];
                    } else {
                        for (int i = 0; i < S; ++i) v += alpha[(t - 1) * S + i] * m.A[i * S + j];
                    }
                    a[j] = v * emit(m, j, r.seq, t);
                    sum += a[j];
                }
                if (!(sum > 0))
                    throw std::runtime_error(r.name + ": sequence impossible under the profile");
                for (int j = 0; j < S; ++j) a[j] /= sum;
                loglik += std::log(sum);
            }

            // Backward from the end, normalised at every position; posteriors replace the forward
            // vectors as soon as they are known.
            for (int i = 0; i < S; ++i) beta[i] = 1.0;
            for (int64_t t = N - 1; t >= 0; --t) {
                if (t < N - 1) {
                    double sum = 0;
                    for (int i = 0; i < S; ++i) {
                        double v = 0;
                        for (int j = 0; j < S; ++j)
                            v += m.A[i * S + j] * emit(m, j, r.seq, t + 1) * beta[j];
                        next[i] = v;
                        sum += v;
                    }
                    for (int i = 0; i < S; ++i) beta[i] = next[i] / sum;
                }
                double* a = &alpha[t * S];
                double z = 0;
                for (int i = 0; i < S; ++i) z += a[i] * beta[i];
                for (int i = 0; i < S; ++i) a[i] = a[i] * beta[i] / z;
            }
            std::fprintf(stderr, "baseline: %s\t%lld bp\tlog-likelihood %.17g\n", r.name.c_str(),
                         static_cast<long long>(N), loglik);

            // Bases in runs of >= 100 unknown bases (assembly gaps, README "Calls") belong to no
            // call, and no merge reaches across one.
            std::vector<char> in_gap(static_cast<size_t>(N), 0);
            for (int64_t t = 0; t < N;) {
                int64_t u = t;
                while (u < N && r.seq[u] == 4) ++u;
                if (u - t >= 100) std::fill(in_gap.begin() + t, in_gap.begin() + u, 1);
                t = u > t ? u : t + 1;
            }
            std::vector<int64_t> gaps_before(static_cast<size_t>(N) + 1, 0);
            for (int64_t t = 0; t < N; ++t) gaps_before[t + 1] = gaps_before[t] + in_gap[t];
            // Calls per reportable region, in forward order.
            for (size_t reg = 0; reg < m.region_names.size(); ++reg) {
                if (!m.report[reg]) continue;
                const auto p = [&](int64_t t) {
                    double v = 0;
                    for (int s = 0; s < S; ++s)
                        if (m.region[s] == static_cast<int>(reg)) v += alpha[t * S + s];
                    return v;
                };
                std::vector<Call> runs;
                for (int64_t t = 0; t < N; ++t) {
                    if (!in_gap[t] && p(t) >= m.min_posterior) {
                        if (!runs.empty() && runs.back().end == t) {
                            runs.back().end = t + 1;
                        } else {
                            runs.push_back({t, t + 1, 0, 0});
                        }
                    }
                }
                if (post)
                    for (int64_t t = 0; t < N; ++t)
                        std::fprintf(post, "%s\t%s\t%lld\t%.17g\n", r.name.c_str(),
                                     m.region_names[reg].c_str(), static_cast<long long>(t), p(t));
                std::vector<Call> merged;
                for (const Call& run : runs) {
                    if (!merged.empty() && run.begin - merged.back().end < m.merge_gap &&
                        gaps_before[run.begin] == gaps_before[merged.back().end])
                        merged.back().end = run.end;
                    else
                        merged.push_back(run);
                }
                for (Call& c : merged) {
                    if (c.end - c.begin < m.min_length) continue;
                    c.sum = 0;
                    c.confident = 0;
                    for (int64_t t = c.begin; t < c.end; ++t) {
                        c.sum += p(t);
                        c.confident += p(t) >= 0.95;
                    }
                    const std::string line = bed_line(r.name, r, c, m.region_names[reg]);
                    if (std::fputs(line.c_str(), out) < 0) throw std::runtime_error("write failed");
                }
            }
        }
        if (post && std::fclose(post) != 0) throw std::runtime_error("write failed: " + posteriors);
        if (std::fflush(out) != 0 || (out != stdout && std::fclose(out) != 0))
            throw std::runtime_error("write failed: " + output);
    } catch (const std::exception& e) {
        std::fprintf(stderr, "baseline: error: %s\n", e.what());
        return 1;
    }
    return 0;
}
