// Interval files: reading BED3+ (coordinates 0-based half-open) with errors naming file and line.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

namespace tidemark {

/// One BED record: chrom, start, end and (when present) the name column.
struct Interval {
    std::string chrom;
    int64_t begin = 0;
    int64_t end = 0;
    std::string name;  ///< column 4, empty when the file has only three columns
    int64_t line = 0;  ///< 1-based line in the file it was read from (0 = not read from a file)
};

/// Reads a BED3+ file ("-" = stdin; gzip and bgzip accepted). Blank lines, lines starting with
/// `#` and lines whose first word is `track` or `browser` are skipped; any other header is an
/// error. Throws InputError naming file and line for fewer than three columns, non-integer or
/// negative coordinates, or start > end.
std::vector<Interval> read_bed(const std::string& path);

}  // namespace tidemark
