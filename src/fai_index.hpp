// Internal: the faidx index (.fai, and .gzi for bgzip) built and read by tidemark itself, with
// 64-bit lengths throughout; shared by region reading and sharding.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

namespace tidemark::detail {

/// One line of a faidx index: NAME, LENGTH, OFFSET, LINEBASES, LINEWIDTH (tab-separated).
struct FaiEntry {
    std::string name;
    int64_t length = 0;
    bool has_layout = false;  ///< OFFSET, LINEBASES and LINEWIDTH read, LINEBASES > 0
    int64_t offset = 0, line_bases = 0, line_bytes = 0;
};

/// The index's lines. Throws InputError naming the line when NAME or LENGTH is missing or bad
/// (the index must be rebuilt); a line without a usable layout has has_layout false.
std::vector<FaiEntry> read_fai(const std::string& fai_path);

/// Indexes the FASTA at `path` (plain text or bgzip) into `fai_path` (and `gzi_path` for bgzip,
/// left empty otherwise), in the layout samtools faidx writes: empty records are left out, as
/// faidx leaves them out. Unlike htslib 1.16's builder it accepts an empty last record and
/// CR-only line ends. Returns "" on success, else why the file cannot be indexed (naming the
/// line and record); throws IoError when an index file cannot be written.
std::string build_fai(const std::string& path, const std::string& fai_path,
                      const std::string& gzi_path);

/// True when `path` has a record named `name` (a header line ">name", the name ending at
/// white space). One pass over the file's bytes, for error messages only.
bool has_record_named(const std::string& path, const std::string& name);

}  // namespace tidemark::detail
