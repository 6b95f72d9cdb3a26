// BED3+ reader with validation that names file and line.
#include "tidemark/intervals.hpp"

#include <fmt/format.h>

#include <charconv>
#include <string_view>

#include "byte_source.hpp"
#include "tidemark/error.hpp"

namespace tidemark {
namespace {

int64_t parse_coordinate(const std::string& field, const std::string& where, const char* what) {
    int64_t value = 0;
    const char* first = field.data();
    const char* last = field.data() + field.size();
    const auto [ptr, ec] = std::from_chars(first, last, value);
    if (ec != std::errc() || ptr != last || field.empty()) {
        // A word where a number belongs is usually a header line of another tool.
        const bool word = field.find_first_of("0123456789") == std::string::npos;
        throw InputError(fmt::format("{}: {} '{}' is not an integer{}", where, what, field,
                                     word ? " (header lines must start with '#', 'track' or "
                                            "'browser')"
                                          : ""));
    }
    if (value < 0) throw InputError(fmt::format("{}: {} {} is negative", where, what, value));
    return value;
}

bool first_word_is(const std::string& line, std::string_view word) {
    return line.rfind(word, 0) == 0 &&
           (line.size() == word.size() || line[word.size()] == ' ' || line[word.size()] == '\t');
}

void parse_line(const std::string& line, const std::string& display, int64_t number,
                std::vector<Interval>& out) {
    if (line.empty() || line[0] == '#' || first_word_is(line, "track") ||
        first_word_is(line, "browser"))
        return;
    std::vector<std::string> fields;
    size_t start = 0;
    for (;;) {
        const size_t tab = line.find('\t', start);
        fields.push_back(line.substr(start, tab == std::string::npos ? tab : tab - start));
        if (tab == std::string::npos) break;
        start = tab + 1;
    }
    const std::string where = fmt::format("{}:{}", display, number);
    if (fields.size() < 3)
        throw InputError(fmt::format(
            "{}: expected at least 3 tab-separated columns (chrom, start, end), found {}", where,
            fields.size()));
    Interval iv;
    iv.chrom = fields[0];
    if (iv.chrom.empty()) throw InputError(where + ": empty chrom column");
    iv.begin = parse_coordinate(fields[1], where, "start");
    iv.end = parse_coordinate(fields[2], where, "end");
    if (iv.begin > iv.end)
        throw InputError(
            fmt::format("{}: start {} is greater than end {}", where, iv.begin, iv.end));
    if (fields.size() > 3) iv.name = fields[3];
    iv.line = number;
    out.push_back(std::move(iv));
}

}  // namespace

std::vector<Interval> read_bed(const std::string& path) {
    const std::string display = path == "-" ? "<stdin>" : path;
    auto source = detail::open_byte_source(path);
    std::vector<Interval> out;
    std::vector<char> buf(1 << 16);
    std::string line;
    int64_t number = 1;
    for (;;) {
        const size_t got = source->read(buf.data(), buf.size());
        if (got == 0) break;
        for (size_t i = 0; i < got; ++i) {
            const char ch = buf[i];
            if (ch == '\n') {
                if (!line.empty() && line.back() == '\r') line.pop_back();
                parse_line(line, display, number++, out);
                line.clear();
            } else {
                line.push_back(ch);
            }
        }
    }
    if (!line.empty()) {
        if (line.back() == '\r') line.pop_back();
        parse_line(line, display, number, out);
    }
    return out;
}

}  // namespace tidemark
