// The faidx index built and read here (64-bit lengths; CR-only line ends and an empty last
// record accepted), in the format samtools faidx writes and htslib's faidx reads.
#include "fai_index.hpp"

#include <fmt/format.h>
#include <htslib/bgzf.h>

#include <cstdio>
#include <fstream>
#include <memory>
#include <sstream>
#include <unordered_set>

#include "tidemark/error.hpp"

namespace tidemark::detail {
namespace {

struct BgzfCloser {
    void operator()(BGZF* fp) const { bgzf_close(fp); }
};
using BgzfPtr = std::unique_ptr<BGZF, BgzfCloser>;

bool is_space(unsigned char c) {
    return c == ' ' || c == '\t' || c == '\n' || c == '\r' || c == '\v' || c == '\f';
}

// Feeds the lines of a file to `line(text, bytes, graphic, next_offset)` until it returns false:
// text is the line without its line end ("\n", "\r\n" or a lone "\r"), cut to its first
// max_kept bytes; bytes counts the whole line with its line end, graphic its bytes other than
// white space; next_offset is the offset of the byte after the line end. Returns false when a
// read fails.
template <typename Line>
bool for_each_line(BGZF* fp, size_t max_kept, Line&& line) {
    std::vector<char> buffer(size_t{1} << 20);
    std::string text;
    int64_t offset = 0, bytes = 0, graphic = 0;  // of the current line so far
    bool pending_cr = false;
    const auto end_line = [&](int64_t line_bytes, int64_t next) {
        const bool more = line(text, line_bytes, graphic, next);
        text.clear();
        bytes = graphic = 0;
        return more;
    };
    for (;;) {
        const ssize_t got = bgzf_read(fp, buffer.data(), buffer.size());
        if (got < 0) return false;
        if (got == 0) break;
        for (ssize_t i = 0; i < got; ++i, ++offset) {
            const char c = buffer[static_cast<size_t>(i)];
            if (pending_cr) {
                pending_cr = false;
                if (c == '\n') {
                    if (!end_line(bytes + 1, offset + 1)) return true;
                    continue;
                }
                if (!end_line(bytes, offset)) return true;
            }
            ++bytes;
            if (c == '\r') {
                pending_cr = true;
            } else if (c == '\n') {
                if (!end_line(bytes, offset + 1)) return true;
            } else {
                graphic += !is_space(static_cast<unsigned char>(c));
                if (text.size() < max_kept) text.push_back(c);
            }
        }
    }
    if (bytes > 0) end_line(bytes, offset);
    return true;
}

std::string header_name(const std::string& header) {
    size_t b = 1;
    while (b < header.size() && is_space(static_cast<unsigned char>(header[b]))) ++b;
    size_t e = b;
    while (e < header.size() && !is_space(static_cast<unsigned char>(header[e]))) ++e;
    return header.substr(b, e - b);
}

}  // namespace

std::vector<FaiEntry> read_fai(const std::string& fai_path) {
    std::ifstream in(fai_path);
    if (!in) throw InputError(fai_path + ": cannot open the index");
    std::vector<FaiEntry> entries;
    std::string line;
    int64_t number = 0;
    while (std::getline(in, line)) {
        ++number;
        const auto tab = line.find('\t');
        const auto tab2 = tab == std::string::npos ? tab : line.find('\t', tab + 1);
        if (tab == std::string::npos || tab == 0)
            throw InputError(
                fmt::format("{}: line {}: not a faidx index line (NAME<TAB>LENGTH...); delete "
                            "the index and rerun",
                            fai_path, number));
        FaiEntry e;
        e.name = line.substr(0, tab);
        try {
            e.length = std::stoll(line.substr(
                tab + 1, tab2 == std::string::npos ? std::string::npos : tab2 - tab - 1));
        } catch (const std::exception&) {
            throw InputError(fmt::format(
                "{}: line {}: bad sequence length; delete the index and rerun", fai_path, number));
        }
        if (e.length < 0)
            throw InputError(fmt::format(
                "{}: line {}: bad sequence length; delete the index and rerun", fai_path, number));
        if (tab2 != std::string::npos) {
            std::istringstream layout(line.substr(tab2 + 1));
            e.has_layout = static_cast<bool>(layout >> e.offset >> e.line_bases >> e.line_bytes) &&
                           e.line_bases > 0;
        }
        entries.push_back(std::move(e));
    }
    return entries;
}

std::string build_fai(const std::string& path, const std::string& fai_path,
                      const std::string& gzi_path) {
    BgzfPtr fp(bgzf_open(path.c_str(), "r"));
    if (!fp) return "cannot open it";
    const int compression = bgzf_compression(fp.get());
    if (compression == 1) return "plain gzip cannot be indexed (bgzip can)";
    if (compression == 2 && bgzf_index_build_init(fp.get()) != 0)
        return "cannot start its bgzip index (.gzi)";

    std::vector<FaiEntry> entries;
    std::unordered_set<std::string> names;
    FaiEntry record;         // the record being read
    bool in_record = false;  // a header was seen
    bool ended = false;      // a shorter or blank line ended the record's sequence
    int64_t line_number = 0;
    std::string problem;
    const auto finish = [&] {
        if (in_record && record.length > 0) entries.push_back(record);
    };
    const bool read = for_each_line(
        fp.get(), 4096, [&](const std::string& text, int64_t bytes, int64_t bases, int64_t next) {
            ++line_number;
            if (!text.empty() && text[0] == '>') {
                finish();
                record = FaiEntry{header_name(text), 0, true, next, 0, 0};
                if (record.name.empty()) {
                    problem = fmt::format("line {}: a header with no record name", line_number);
                    return false;
                }
                if (!names.insert(record.name).second) {
                    problem = fmt::format("line {}: duplicate record name '{}'", line_number,
                                          record.name);
                    return false;
                }
                in_record = true;
                ended = false;
                return true;
            }
            if (bases == 0) {  // a blank line ends the record's sequence
                ended = in_record;
                return true;
            }
            if (!in_record) {
                problem = fmt::format("line {}: expected a FASTA header ('>')", line_number);
                return false;
            }
            const bool first = record.line_bytes == 0;
            if (ended || (!first && bytes > record.line_bytes) ||
                (!first && bytes == record.line_bytes && bases != record.line_bases)) {
                problem = fmt::format(
                    "line {}: record '{}' has lines of different lengths; random access "
                    "(faidx) needs every line of a record but its last to hold the same "
                    "number of bases",
                    line_number, record.name);
                return false;
            }
            if (first && bytes > int64_t{0xFFFFFFFF}) {  // faidx keeps line widths in 32 bits
                problem = fmt::format(
                    "line {}: record '{}' has a line of 4 GiB or more, which faidx cannot "
                    "index; wrap its lines (any width)",
                    line_number, record.name);
                return false;
            }
            if (first) {
                record.line_bases = bases;
                record.line_bytes = bytes;
            } else if (bytes < record.line_bytes) {
                ended = true;
            }
            record.length += bases;
            return true;
        });
    if (!read) return "read failed (truncated or corrupt compressed data?)";
    if (!problem.empty()) return problem;
    finish();
    if (compression == 2 && bgzf_index_dump(fp.get(), gzi_path.c_str(), nullptr) < 0)
        throw IoError(gzi_path + ": cannot write the bgzip index");
    std::FILE* out = std::fopen(fai_path.c_str(), "w");
    if (!out) throw IoError(fai_path + ": cannot write the index");
    bool ok = true;
    for (const FaiEntry& e : entries)
        ok &= std::fprintf(out, "%s\t%lld\t%lld\t%lld\t%lld\n", e.name.c_str(),
                           static_cast<long long>(e.length), static_cast<long long>(e.offset),
                           static_cast<long long>(e.line_bases),
                           static_cast<long long>(e.line_bytes)) > 0;
    ok &= std::fclose(out) == 0;
    if (!ok) throw IoError(fai_path + ": cannot write the index");
    return "";
}

bool has_record_named(const std::string& path, const std::string& name) {
    BgzfPtr fp(bgzf_open(path.c_str(), "r"));
    if (!fp) return false;
    bool found = false;
    for_each_line(fp.get(), name.size() + 4096,
                  [&](const std::string& text, int64_t, int64_t, int64_t) {
                      found = !text.empty() && text[0] == '>' && header_name(text) == name;
                      return !found;
                  });
    return found;
}

}  // namespace tidemark::detail
