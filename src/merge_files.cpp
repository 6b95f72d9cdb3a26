// Merge, step 3: the shards' BED, GFF3, bedGraph, bigWig and chrom-sizes files streamed back
// into input order (split records: their calls formatted here, their track pieces joined).
#include <fmt/format.h>
#include <sys/stat.h>

#include <algorithm>
#include <map>
#include <set>

#include "merge_internal.hpp"
#include "tidemark/error.hpp"

namespace tidemark::merging {

// Lines of a plain or BGZF-compressed text file, with one line of look-ahead.
LineReader::LineReader(std::string path) : path_(std::move(path)) {
    fp_ = bgzf_open(path_.c_str(), "r");
    if (!fp_) throw InputError(path_ + ": cannot open");
}

LineReader::~LineReader() {
    if (fp_) bgzf_close(fp_);
    free(line_.s);
}

const std::string* LineReader::peek() {
    if (!have_ && !eof_) {
        const int r = bgzf_getline(fp_, '\n', &line_);
        if (r < -1)
            throw InputError(path_ + ": read error (truncated or corrupt compressed file?)");
        if (r == -1)
            eof_ = true;
        else {
            current_.assign(line_.s, line_.l);
            ++number_;
            have_ = true;
        }
    }
    return have_ ? &current_ : nullptr;
}

namespace {

bool is_command_line(const std::string& line) {
    return line.rfind("#command:", 0) == 0;
}

bool is_header(const std::string& line) {
    return line.empty() || line[0] == '#' || line.rfind("track ", 0) == 0 ||
           line.rfind("browser ", 0) == 0;
}

std::string chrom_of(const std::string& line) {
    return line.substr(0, line.find('\t'));
}

// A track line's value: what follows the third tab.
std::string_view value_of(const std::string& line) {
    const size_t third = line.find('\t', line.find('\t', line.find('\t') + 1) + 1);
    return third == std::string::npos ? std::string_view() : std::string_view(line).substr(third);
}

}  // namespace

// chrom, start and end of a BED or bedGraph line; false when the line has no such columns.
bool coordinates(const std::string& line, std::string& chrom, int64_t& start, int64_t& end) {
    const auto t1 = line.find('\t');
    if (t1 == std::string::npos) return false;
    const auto t2 = line.find('\t', t1 + 1);
    if (t2 == std::string::npos) return false;
    auto t3 = line.find('\t', t2 + 1);
    if (t3 == std::string::npos) t3 = line.size();
    chrom.assign(line, 0, t1);
    try {
        start = std::stoll(line.substr(t1 + 1, t2 - t1 - 1));
        end = std::stoll(line.substr(t2 + 1, t3 - t2 - 1));
    } catch (const std::exception&) {
        return false;
    }
    return true;
}

// Streams the shard files (files[k] belongs to docs[k]) into out in input order. The lines of a
// record are those that follow in its shard's file with its name and coordinates inside it,
// each starting at or after the previous line's end (calls are disjoint, tracks tile). Shared
// records: split_lines (BED: formatted by merge), else (tracks) the lines of each segment from
// the shard that decoded it.
// Returns the output uncommitted, so that nothing appears unless every merge succeeds.
std::unique_ptr<OutputFile> merge_text(const std::vector<ShardDoc>& docs, const MergedRun& run,
                                       const std::vector<std::string>& files,
                                       const std::string& target, const OutputFormat& base_format,
                                       const std::vector<std::string>* split_lines) {
    std::vector<std::unique_ptr<LineReader>> readers;
    for (const auto& f : files) readers.push_back(std::make_unique<LineReader>(f));
    std::string header, first_compared;
    for (size_t k = 0; k < readers.size(); ++k) {
        std::string h, compared;
        while (const std::string* line = readers[k]->peek()) {
            if (!is_header(*line)) break;
            h += *line + "\n";
            if (!is_command_line(*line)) compared += *line + "\n";
            readers[k]->pop();
        }
        if (docs[k].index == first_shard(docs).index) header = h;
        if (k == 0)
            first_compared = compared;
        else if (compared != first_compared)
            throw InputError(fmt::format(
                "{} and {}: the header lines differ, so the files come from different runs",
                files[0], files[k]));
    }
    OutputFormat format = base_format;
    format.skip_lines =
        header.rfind("track ", 0) == 0 ? 1 : 0;  // as scan: the track line comes first
    auto out_file = std::make_unique<OutputFile>(target, format);
    OutputFile& out = *out_file;
    std::string buffer = header;
    std::string chrom;
    int64_t start = 0, end = 0;
    // Copies the lines of `name` inside [from, to) that follow in r. With stitch, a line that
    // continues the one before (adjacent, same value) extends it instead: a piece of a shared
    // record ends its last run at the piece's end, where a single run may have continued it.
    std::string held;  // stitch mode: the last line, not yet written
    int64_t held_start = 0, held_end = 0;
    const auto flush_held = [&] {
        if (held.empty()) return;
        const size_t third = held.find('\t', held.find('\t', held.find('\t') + 1) + 1);
        buffer +=
            fmt::format("{}\t{}\t{}{}\n", chrom_of(held), held_start, held_end, held.substr(third));
        held.clear();
    };
    const auto copy_lines = [&](LineReader& r, const std::string& name, int64_t from, int64_t to,
                                bool stitch) {
        int64_t previous_end = from;
        while (const std::string* line = r.peek()) {
            if (!coordinates(*line, chrom, start, end))
                throw InputError(fmt::format("{}: line {}: expected CHROM<TAB>START<TAB>END...",
                                             r.path(), r.number()));
            if (chrom != name || start < previous_end || end > to) break;
            previous_end = end;
            if (stitch) {
                if (!held.empty() && held_end == start && value_of(held) == value_of(*line)) {
                    held_end = end;
                } else {
                    flush_held();
                    held = *line;
                    held_start = start;
                    held_end = end;
                }
            } else {
                buffer += *line;
                buffer += '\n';
            }
            r.pop();
            if (buffer.size() > (1 << 20)) {
                out.write(buffer);
                buffer.clear();
            }
        }
    };
    for (const Slot& slot : run.slots) {
        if (slot.split < 0) {
            const ContigSummary& c = docs[slot.doc].contigs[slot.index];
            copy_lines(*readers[slot.doc], c.name, c.offset, c.offset + c.length, false);
            continue;
        }
        const SplitAssembly& a = run.split[static_cast<size_t>(slot.split)];
        if (split_lines) {
            buffer += (*split_lines)[static_cast<size_t>(slot.split)];
            continue;
        }
        // Segments come from the shards that decoded them, in order.
        const int64_t offset = a.record.whole.offset;
        for (size_t k = 0; k < a.segments.size();) {
            size_t next = k + 1;
            while (next < a.segments.size() && a.segments[next].first == a.segments[k].first)
                ++next;
            copy_lines(*readers[a.segments[k].first], a.record.whole.name,
                       offset + a.segments[k].second->begin,
                       offset + a.segments[next - 1].second->end, true);
            k = next;
        }
        flush_held();
    }
    for (size_t k = 0; k < readers.size(); ++k)
        if (const std::string* line = readers[k]->peek())
            throw InputError(fmt::format(
                "{}: line {} ('{}') belongs to no record of shard {}/{} ({}); give the files "
                "in the same shard order as the summaries",
                files[k], readers[k]->number(), line->substr(0, 60), docs[k].index, docs[k].count,
                docs[k].path));
    out.write(buffer);
    return out_file;
}

// GFF3: after the version line, each record is a ##sequence-region line (one per record of at
// least one base, as scan writes it) followed by its features; an empty record has neither. Blocks
// go back into input order and the feature IDs (REGION_SERIAL, numbered through the run) are
// renumbered in that order. Split records are formatted here.
std::unique_ptr<OutputFile> merge_gff3(const std::vector<ShardDoc>& docs, const MergedRun& run,
                                       const std::vector<std::string>& files,
                                       const std::string& target) {
    std::vector<std::vector<std::string>> blocks(docs.size());
    std::string header;
    for (size_t k = 0; k < files.size(); ++k) {
        LineReader r(files[k]);
        std::string h;
        while (const std::string* line = r.peek()) {
            if (line->rfind("##sequence-region ", 0) == 0) blocks[k].emplace_back();
            if (blocks[k].empty())
                h += *line + "\n";
            else
                blocks[k].back() += *line + "\n";
            r.pop();
        }
        if (k == 0)
            header = h;
        else if (h != header)
            throw InputError(fmt::format("{} and {}: the GFF3 headers differ", files[0], files[k]));
        const auto& contigs = docs[k].contigs;
        const auto with_bases = std::count_if(contigs.begin(), contigs.end(),
                                              [](const auto& c) { return c.length > 0; });
        if (blocks[k].size() != static_cast<size_t>(with_bases))
            throw InputError(fmt::format(
                "{}: {} sequence-region blocks but shard {}/{} ({}) has {} records with bases; "
                "give the files in the same shard order as the summaries",
                files[k], blocks[k].size(), docs[k].index, docs[k].count, docs[k].path,
                with_bases));
        std::vector<std::string> by_record;  // an empty block for each empty record
        size_t next = 0;
        for (const auto& c : contigs)
            by_record.push_back(c.length > 0 ? std::move(blocks[k][next++]) : "");
        blocks[k] = std::move(by_record);
    }
    auto out = std::make_unique<OutputFile>(target);
    std::string text = header;
    int64_t serial = 0;
    for (const Slot& slot : run.slots) {
        if (slot.split >= 0) {  // formatted here, numbered on through the run
            const SplitAssembly& a = run.split[static_cast<size_t>(slot.split)];
            text += format_gff3_sequence_region(a.contig);
            for (const Call& call : a.calls)
                text += format_gff3_feature(run.context->model, a.contig, call, ++serial);
            continue;
        }
        const std::string& block = blocks[slot.doc][slot.index];
        size_t begin = 0;
        while (begin < block.size()) {
            const size_t end = block.find('\n', begin);
            std::string line = block.substr(begin, end - begin);
            begin = end + 1;
            const size_t id = line.find("\tID=");
            if (!line.empty() && line[0] != '#' && id != std::string::npos) {
                const size_t semi = line.find(';', id);
                const size_t underscore = semi == std::string::npos ? semi : line.rfind('_', semi);
                if (semi == std::string::npos || underscore == std::string::npos || underscore < id)
                    throw InputError(fmt::format("{}: feature without a tidemark ID: {}",
                                                 files[slot.doc], line.substr(0, 80)));
                line.replace(underscore + 1, semi - underscore - 1, std::to_string(++serial));
            }
            text += line + "\n";
        }
        if (text.size() > (1 << 20)) {
            out->write(text);
            text.clear();
        }
    }
    out->write(text);
    return out;
}

bool exists(const std::string& path) {
    struct stat st {};
    return stat(path.c_str(), &st) == 0;
}

// Chrom sizes: scan writes "name<TAB>length" once for each run of records with one name (several
// regions of one sequence), so the merged file walks the records in input order the same way,
// taking each length from a shard that decoded the record.
std::unique_ptr<OutputFile> merge_chrom_sizes(const std::vector<ShardDoc>& docs,
                                              const MergedRun& run,
                                              const std::vector<std::string>& files,
                                              const std::string& target) {
    const auto records = shard_records(docs);
    std::vector<std::map<std::string, std::string>> lengths(files.size());
    for (size_t k = 0; k < files.size(); ++k) {
        std::set<std::string> names;
        for (const auto& r : records[k]) names.insert(r.second);
        LineReader r(files[k]);
        while (const std::string* line = r.peek()) {
            const size_t tab = line->find('\t');
            const std::string name = line->substr(0, tab);
            const std::string length = tab == std::string::npos ? "" : line->substr(tab + 1);
            if (tab == std::string::npos || name.empty() || length.empty() ||
                length.find_first_not_of("0123456789") != std::string::npos)
                throw InputError(
                    fmt::format("{}: line {}: expected NAME<TAB>LENGTH", files[k], r.number()));
            if (!names.count(name))
                throw InputError(
                    fmt::format("{}: line {}: '{}' is no record of {}; give the files in the same "
                                "shard order as the summaries",
                                files[k], r.number(), name, shard_label(docs[k])));
            const auto [at, fresh] = lengths[k].emplace(name, length);
            if (!fresh && at->second != length)
                throw InputError(fmt::format("{}: line {}: '{}' has lengths {} and {}", files[k],
                                             r.number(), name, at->second, length));
            r.pop();
        }
        for (const auto& name : names)
            if (!lengths[k].count(name))
                throw InputError(fmt::format(
                    "{}: no line for '{}', a record of {}; was it written by that shard?", files[k],
                    name, shard_label(docs[k])));
    }
    auto out = std::make_unique<OutputFile>(target);
    std::string text, last;
    bool first = true;
    for (const Slot& slot : run.slots) {
        const std::string name = record_name(docs, run, slot);
        if (!first && name == last) continue;
        first = false;
        last = name;
        text += name + "\t" + lengths[source_doc(run, slot)].at(name) + "\n";
    }
    out->write(text);
    return out;
}

// bigWig tracks: the shards' intervals go through BigWigWriter in input order, which gives the
// single run's file byte for byte (the writer's output depends only on the sequence list and
// the interval stream). A split record's pieces end their last run at the piece's end, where a
// single run may have continued it, so adjacent equal values across pieces are joined again.
// Returns the writer unclosed: close() writes and commits the file.
std::unique_ptr<BigWigWriter> merge_bigwig(const std::vector<ShardDoc>& docs, const MergedRun& run,
                                           const std::vector<std::string>& files,
                                           const std::string& target) {
    const auto records = shard_records(docs);
    std::vector<std::unique_ptr<BigWigReader>> readers;
    for (size_t k = 0; k < files.size(); ++k)  // a shard without records wrote no bigWig
        readers.push_back(records[k].empty() ? nullptr : std::make_unique<BigWigReader>(files[k]));
    std::vector<std::map<std::string, int64_t>> lengths(files.size());
    for (size_t k = 0; k < files.size(); ++k) {
        if (!readers[k]) continue;
        std::set<std::string> names;
        for (const auto& r : records[k]) names.insert(r.second);
        for (const auto& seq : readers[k]->sequences()) {
            if (!names.count(seq.name))
                throw InputError(
                    fmt::format("{}: sequence '{}' is no record of {}; give the prefixes in the "
                                "same shard order as the summaries",
                                files[k], seq.name, shard_label(docs[k])));
            lengths[k][seq.name] = seq.length;
        }
        for (const auto& name : names)
            if (!lengths[k].count(name))
                throw InputError(fmt::format(
                    "{}: no sequence '{}', a record of {}; was it written by that shard?", files[k],
                    name, shard_label(docs[k])));
    }
    auto out = std::make_unique<BigWigWriter>(target);
    for (const Slot& slot : run.slots) {
        const std::string name = record_name(docs, run, slot);
        const size_t source = source_doc(run, slot);
        const int64_t length = lengths[source].at(name);
        if (slot.split >= 0)
            for (const auto& [doc, seg] : run.split[static_cast<size_t>(slot.split)].segments)
                if (lengths[doc].at(name) != length)
                    throw InputError(fmt::format("{} and {}: sequence '{}' has lengths {} and {}",
                                                 files[source], files[doc], name, length,
                                                 lengths[doc].at(name)));
        const int sequence = out->add_sequence(name, length);
        // The intervals of [from, to) in file k must follow in order inside it, as scan writes them
        // (tiling it but for long unknown runs); anything else means a file of another shard or
        // run.
        bool held = false;
        BigWigReader::Interval last;
        const auto copy = [&](size_t k, int64_t from, int64_t to, bool stitch) {
            int64_t at = from;
            readers[k]->intervals(name, from, to, [&](const BigWigReader::Interval& iv) {
                if (iv.start < at || iv.end > to || iv.end <= iv.start)
                    throw InputError(fmt::format(
                        "{}: interval {}:{}-{} (0-based, half-open) does not continue the track of "
                        "{}:{}-{} at {}; the file does not belong to {}",
                        files[k], name, iv.start, iv.end, name, from, to, at,
                        shard_label(docs[k])));
                at = iv.end;
                if (!stitch) {
                    out->add(sequence, iv.start, iv.end, iv.value);
                } else if (held && last.end == iv.start && last.value == iv.value) {
                    last.end = iv.end;
                } else {
                    if (held) out->add(sequence, last.start, last.end, last.value);
                    last = iv;
                    held = true;
                }
            });
        };
        if (slot.split < 0) {
            const ContigSummary& c = docs[slot.doc].contigs[slot.index];
            copy(slot.doc, c.offset, c.offset + c.length, false);
            continue;
        }
        const SplitAssembly& a = run.split[static_cast<size_t>(slot.split)];
        const int64_t offset = a.record.whole.offset;
        for (size_t k = 0;
             k < a.segments.size();) {  // consecutive segments of one shard: one piece
            size_t next = k + 1;
            while (next < a.segments.size() && a.segments[next].first == a.segments[k].first)
                ++next;
            copy(a.segments[k].first, offset + a.segments[k].second->begin,
                 offset + a.segments[next - 1].second->end, true);
            k = next;
        }
        if (held) out->add(sequence, last.start, last.end, last.value);
    }
    return out;
}

}  // namespace tidemark::merging
