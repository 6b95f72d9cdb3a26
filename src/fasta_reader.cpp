// Streaming FASTA parser: one record at a time into a reusable Contig, errors with
// file/record/line.
#include <fmt/format.h>

#include <algorithm>
#include <array>
#include <limits>
#include <memory>
#include <vector>

#include "base_table.hpp"
#include "byte_source.hpp"
#include "name_set.hpp"
#include "tidemark/error.hpp"
#include "tidemark/sequence.hpp"

namespace tidemark {
namespace {

using detail::not_a_base;

class FastaStream final : public SequenceSource {
public:
    /// sequential: read from start to end (decompression may run ahead on a helper thread).
    explicit FastaStream(std::string path, bool sequential = true)
        : path_(std::move(path)),
          display_(path_ == "-" ? "<stdin>" : path_),
          source_(detail::open_byte_source(path_, sequential)),
          buf_(new char[buf_size]),
          codes_(new uint8_t[buf_size]) {}

    FastaStream(std::string path, std::vector<RecordStart> starts)
        : FastaStream(std::move(path), false) {
        starts_ = std::move(starts);
        jumping_ = true;
    }

    const std::string& path() const override { return path_; }

    bool next(Contig& contig) override {
        if (jumping_) {  // only the records that start at starts_: move to the next one
            if (next_start_ == starts_.size()) return false;
            const RecordStart& at = starts_[next_start_++];
            if (!source_->seek(at.offset))
                throw InputError(
                    fmt::format("{}: cannot move to byte {} (through the .fai/.gzi index); delete "
                                "the index and rerun",
                                display_, at.offset));
            pos_ = end_ = 0;
            line_ = at.line;
            at_line_start_ = true;
            skip_lf_ = started_ = have_header_ = false;
        }
        if (!have_header_ && !find_first_header()) return false;
        contig.clear();
        contig.name = pending_name_;
        if (!names_.insert(contig.name))
            throw InputError(fmt::format("{}:{}: duplicate record name '{}'", display_,
                                         header_line_, contig.name));
        have_header_ = false;
        read_sequence(contig);
        return true;
    }

private:
    bool refill() {
        pos_ = 0;
        end_ = source_->read(buf_.get(), buf_size);
        return end_ > 0;
    }

    // Consumes a line terminator at buf_[pos_]: "\n", "\r\n" or a lone "\r".
    void end_line(char ch) {
        ++pos_;
        ++line_;
        skip_lf_ = (ch == '\r');
        at_line_start_ = true;
    }

    // Called at a line start; returns false at EOF.
    bool skip_pending_lf() {
        if (pos_ == end_ && !refill()) return false;
        if (skip_lf_) {
            skip_lf_ = false;
            if (buf_[pos_] == '\n') {
                ++pos_;
                if (pos_ == end_ && !refill()) return false;
            }
        }
        return true;
    }

    bool find_first_header() {
        if (started_) return false;  // the previous record ended at EOF
        started_ = true;
        while (skip_pending_lf()) {
            const char ch = buf_[pos_];
            if (ch == '\n' || ch == '\r') {
                end_line(ch);
                continue;
            }
            if (ch != '>')
                throw InputError(fmt::format(
                    "{}:{}: expected a FASTA header line starting with '>' but found {} "
                    "(is this a FASTA file?)",
                    display_, line_, detail::describe_byte(static_cast<unsigned char>(ch))));
            read_header();
            return true;
        }
        return false;
    }

    // buf_[pos_] == '>' at a line start.
    void read_header() {
        header_line_ = line_;
        std::string header;
        ++pos_;
        for (;;) {
            if (pos_ == end_ && !refill()) break;
            const char ch = buf_[pos_];
            if (ch == '\n' || ch == '\r') {
                end_line(ch);
                break;
            }
            header.push_back(ch);
            ++pos_;
        }
        const size_t stop = header.find_first_of(" \t");
        pending_name_ = header.substr(0, stop);
        if (pending_name_.empty())
            throw InputError(fmt::format("{}:{}: header line has no record name after '>'",
                                         display_, header_line_));
        have_header_ = true;
    }

    void read_sequence(Contig& contig) {
        const auto& classes = detail::byte_classes();
        const auto& fast = detail::sequence_codes(soft_masked_);
        int64_t column = 0;
        int64_t report_at = growth_hook_ ? growth_step_ : std::numeric_limits<int64_t>::max();
        for (;;) {
            if (contig.length >= report_at) {
                growth_hook_(contig);
                report_at = contig.length + growth_step_;
            }
            if (at_line_start_) {
                if (!skip_pending_lf()) return;
                at_line_start_ = false;
                column = 0;
                if (buf_[pos_] == '>') {
                    read_header();
                    return;
                }
            }
            if (pos_ == end_ && !refill()) return;
            while (pos_ < end_) {
                // Bases are decoded a run at a time into codes_ and appended in bulk; the loop
                // leaves at the first byte that is not a base (line end, space, illegal).
                const auto* p = reinterpret_cast<const unsigned char*>(buf_.get()) + pos_;
                const size_t avail = end_ - pos_;
                uint8_t* out = codes_.get();
                int64_t lower = 0;
                size_t j = 0;
                for (; j < avail; ++j) {
                    const uint8_t v = fast[p[j]];
                    if (v & not_a_base) break;
                    out[j] = v & 7;
                    lower += v >> 3;  // lowercase_flag
                }
                contig.append(out, static_cast<int64_t>(j));
                contig.soft_masked += lower;
                pos_ += j;
                column += static_cast<int64_t>(j);
                if (pos_ == end_) break;
                const unsigned char ch = p[j];
                ++column;
                if (classes[ch] == detail::byte_space) {
                    ++pos_;
                } else if (ch == '\n' || ch == '\r') {
                    end_line(static_cast<char>(ch));
                    break;
                } else {
                    throw InputError(fmt::format(
                        "{}:{}: record '{}': illegal character {} at column {} "
                        "(expected A, C, G, T, N or an IUPAC ambiguity code)",
                        display_, line_, contig.name, detail::describe_byte(ch), column));
                }
            }
        }
    }

    std::string path_, display_;
    std::unique_ptr<detail::ByteSource> source_;
    // Left uninitialised (new[] rather than a vector): a small file then touches only the
    // pages it uses, which shows in the start-up time of short runs.
    static constexpr size_t buf_size = size_t{1} << 20;
    std::unique_ptr<char[]> buf_;
    std::unique_ptr<uint8_t[]> codes_;  ///< base codes of the current run of buf_
    size_t pos_ = 0, end_ = 0;
    int64_t line_ = 1, header_line_ = 0;
    bool at_line_start_ = true, skip_lf_ = false, started_ = false, have_header_ = false;
    std::string pending_name_;
    detail::NameSet names_;  ///< compact: a draft assembly can have millions of records
    std::vector<RecordStart> starts_;
    size_t next_start_ = 0;
    bool jumping_ = false;
};

}  // namespace

void contig_from_text(std::string_view text, Contig& contig, SoftMasked soft) {
    std::string name = std::move(contig.name);
    contig.clear();
    contig.name = std::move(name);
    const auto& codes = detail::sequence_codes(soft);
    const auto& classes = detail::byte_classes();
    std::vector<uint8_t> run;
    run.reserve(std::min<size_t>(text.size(), size_t{1} << 16));
    const auto flush = [&] {
        contig.append(run.data(), static_cast<int64_t>(run.size()));
        run.clear();
    };
    for (size_t i = 0; i < text.size(); ++i) {
        const auto ch = static_cast<unsigned char>(text[i]);
        const uint8_t code = codes[ch];
        if (code != detail::not_a_base) {
            run.push_back(code & 7);
            contig.soft_masked += (code & detail::lowercase_flag) ? 1 : 0;
            if (run.size() == run.capacity()) flush();
        } else if (classes[ch] != detail::byte_space && ch != '\n' && ch != '\r') {
            throw InputError(
                fmt::format("sequence '{}': illegal character {} at position {} "
                            "(expected A, C, G, T, N or an IUPAC ambiguity code)",
                            contig.name, detail::describe_byte(ch), i + 1));
        }
    }
    flush();
}

std::unique_ptr<SequenceSource> open_fasta(const std::string& path) {
    return std::make_unique<FastaStream>(path);
}

void read_record_windows(const std::string& path, const std::string& name, int64_t length,
                         const RecordLayout& layout, const std::vector<RecordWindow>& windows,
                         Contig& contig, SoftMasked soft) {
    if (layout.line_bases <= 0 || layout.line_bytes < layout.line_bases)
        throw InternalError("read_record_windows: no line layout for record " + name);
    const std::unique_ptr<detail::ByteSource> source = detail::open_byte_source(path);
    const auto& classes = detail::byte_classes();
    const auto& fast = detail::sequence_codes(soft);
    constexpr size_t buf_size = size_t{1} << 20;
    std::unique_ptr<char[]> buf(new char[buf_size]);
    std::unique_ptr<uint8_t[]> codes(new uint8_t[buf_size]);
    // Bases [from, to), lowercase counted when count.
    const auto read_range = [&](int64_t from, int64_t to, bool count) {
        if (from >= to) return;
        const int64_t byte =
            layout.offset + from / layout.line_bases * layout.line_bytes + from % layout.line_bases;
        if (!source->seek(byte))
            throw InputError(fmt::format(
                "{}: cannot move to record '{}' position {} (through the .fai/.gzi index)", path,
                name, from + 1));
        int64_t pos = from;
        while (pos < to) {
            const size_t got = source->read(buf.get(), buf_size);
            if (got == 0)
                throw InputError(
                    fmt::format("{}: record '{}' ends at position {}, before its length {} in the "
                                ".fai index; delete the index and rerun",
                                path, name, pos, length));
            size_t n = 0;
            for (size_t i = 0; i < got && pos + static_cast<int64_t>(n) < to; ++i) {
                const auto ch = static_cast<unsigned char>(buf[i]);
                const uint8_t v = fast[ch];
                if (!(v & not_a_base)) {
                    codes[n++] = v & 7;
                    if (count) contig.soft_masked += v >> 3;
                } else if (ch != '\n' && ch != '\r' && classes[ch] != detail::byte_space) {
                    throw InputError(fmt::format(
                        "{}: record '{}': illegal character {} at position {}", path, name,
                        detail::describe_byte(ch), pos + static_cast<int64_t>(n) + 1));
                }
            }
            contig.append(codes.get(), static_cast<int64_t>(n));
            pos += static_cast<int64_t>(n);
        }
    };
    contig.clear();
    contig.name = name;
    for (const RecordWindow& w : windows) {
        if (w.begin < contig.length || w.end > length || w.count_begin < w.begin ||
            w.count_end > w.end)
            throw InternalError("read_record_windows: windows out of order or outside the record");
        contig.append_unknown(w.begin - contig.length);
        read_range(w.begin, w.count_begin, false);
        read_range(w.count_begin, w.count_end, true);
        read_range(w.count_end, w.end, false);
    }
    contig.append_unknown(length - contig.length);
}

std::unique_ptr<SequenceSource> open_fasta_records(const std::string& path,
                                                   std::vector<RecordStart> starts) {
    return std::make_unique<FastaStream>(path, std::move(starts));
}

}  // namespace tidemark
