// bigWig output and input through libBigWig. Its header declares global names (e.g. min, max),
// so it is included in this file only.
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cstdio>
#include <cstring>
#include <deque>
#include <map>
#include <memory>
#include <mutex>
#include <set>
#include <string_view>
#include <unordered_map>
#include <vector>

#include "tidemark/error.hpp"
#include "tidemark/track.hpp"

extern "C" {
#include <bigWig.h>
#include <libdeflate.h>
#include <zlib.h>
}

// libBigWig compresses each data block and zoom block with zlib's compress() (level 6) on the
// thread that closes the file: a quarter of a chrX run with bigWig tracks. This definition
// takes zlib's place as bwGetTid's does below and writes the same zlib format with libdeflate at
// level 1 (zlib's default is 6): on chrX half of libdeflate's level-6 time for a file 5% larger,
// and level 6 was already several times as fast as zlib. Readers inflate the same values; the
// compressed bytes differ from zlib's. Nothing else in tidemark calls compress().
extern "C" int compress(Bytef* dest, uLongf* dest_length, const Bytef* source,
                        uLong source_length) {
    constexpr int level = 1;
    thread_local std::unique_ptr<libdeflate_compressor, void (*)(libdeflate_compressor*)>
        compressor(libdeflate_alloc_compressor(level), libdeflate_free_compressor);
    if (!compressor) return Z_MEM_ERROR;
    const size_t written =
        libdeflate_zlib_compress(compressor.get(), source, source_length, dest, *dest_length);
    if (written == 0) return Z_BUF_ERROR;
    *dest_length = written;
    return Z_OK;
}

// libBigWig reads its data blocks back with zlib's uncompress() when it builds the zoom levels at
// close, and when bigWig files are read (merge): libdeflate inflates the same zlib streams about
// three times as fast. Same results and codes as zlib's for complete streams; any damaged stream
// is Z_DATA_ERROR. Nothing else in tidemark calls uncompress().
extern "C" int uncompress(Bytef* dest, uLongf* dest_length, const Bytef* source,
                          uLong source_length) {
    thread_local std::unique_ptr<libdeflate_decompressor, void (*)(libdeflate_decompressor*)>
        decompressor(libdeflate_alloc_decompressor(), libdeflate_free_decompressor);
    if (!decompressor) return Z_MEM_ERROR;
    size_t written = 0;
    switch (libdeflate_zlib_decompress(decompressor.get(), source, source_length, dest,
                                       *dest_length, &written)) {
        case LIBDEFLATE_SUCCESS:
            *dest_length = written;
            return Z_OK;
        case LIBDEFLATE_INSUFFICIENT_SPACE:
            return Z_BUF_ERROR;
        default:
            return Z_DATA_ERROR;
    }
}

// libBigWig finds a sequence's number by comparing its name with every name of the list
// (bwGetTid): once per sequence while intervals are added and again per sequence while the zoom
// levels are built, so a bigWig of a draft with 300,000 contigs took hours. This definition takes
// the library's place (its calls go through the dynamic symbol table, which prefers the
// executable's) and answers long lists from a hash index, with the library's results.
extern "C" uint32_t bwGetTid(const bigWigFile_t* fp, const char* chrom) {
    if (!fp || !fp->cl || !chrom) return static_cast<uint32_t>(-1);
    const chromList_t* cl = fp->cl;
    const auto linear = [&]() -> uint32_t {
        for (int64_t i = 0; i < cl->nKeys; ++i)
            if (std::strcmp(chrom, cl->chrom[i]) == 0) return static_cast<uint32_t>(i);
        return static_cast<uint32_t>(-1);
    };
    if (cl->nKeys < 64) return linear();
    struct Index {
        const chromList_t* list = nullptr;
        const char* const* names = nullptr;
        int64_t keys = 0;
        std::unordered_map<std::string_view, uint32_t> of;
    };
    static std::mutex mutex;
    static std::deque<Index> indexes;  // the lists seen last (merge reads several files at once)
    const std::lock_guard<std::mutex> lock(mutex);
    const auto build = [&](Index& x) {
        x.list = cl;
        x.names = cl->chrom;
        x.keys = cl->nKeys;
        x.of.clear();
        x.of.reserve(static_cast<size_t>(cl->nKeys));
        for (int64_t i = 0; i < cl->nKeys; ++i)
            x.of.emplace(cl->chrom[i], static_cast<uint32_t>(i));
    };
    auto it = std::find_if(indexes.begin(), indexes.end(), [&](const Index& x) {
        return x.list == cl && x.names == cl->chrom && x.keys == cl->nKeys;
    });
    if (it == indexes.end()) {
        if (indexes.size() == 8) indexes.pop_back();
        indexes.emplace_front();
        build(indexes.front());
        it = indexes.begin();
    }
    // A list freed and another made at the same address: a found name is checked against the
    // list, and a missing one makes the index again before the answer is "none".
    auto found = it->of.find(chrom);
    if (found != it->of.end() && found->second < cl->nKeys &&
        std::strcmp(cl->chrom[found->second], chrom) == 0)
        return found->second;
    build(*it);
    found = it->of.find(chrom);
    return found == it->of.end() ? static_cast<uint32_t>(-1) : found->second;
}

namespace tidemark {

namespace {
struct Record {
    uint32_t sequence, start, end;
    float value;
};
}  // namespace

struct BigWigWriter::Impl {
    std::string path;
    std::FILE* spool = nullptr;   // intervals wait here until the sequence list is complete
    std::vector<Record> pending;  // the spool's next records, written 64 Ki at a time
    std::vector<std::string> names;
    std::vector<uint32_t> lengths;
    std::map<std::string, int> index;    // name -> place in names
    std::unique_ptr<StagedPath> staged;  // written, not yet committed

    void spill() {
        if (!pending.empty() &&
            std::fwrite(pending.data(), sizeof(Record), pending.size(), spool) != pending.size())
            throw IoError(path + ": cannot write the temporary spool file");
        pending.clear();
    }
};

BigWigWriter::BigWigWriter(std::string path) : impl_(std::make_unique<Impl>()) {
    impl_->path = std::move(path);
    impl_->spool = std::tmpfile();
    if (!impl_->spool) throw IoError(impl_->path + ": cannot create a temporary spool file");
}

BigWigWriter::~BigWigWriter() {
    if (impl_->spool) std::fclose(impl_->spool);
}

void check_bigwig_length(const std::string& name, int64_t length) {
    if (length > bigwig_max_length)
        throw InputError("record '" + name + "' has " + std::to_string(length) +
                         " bp, more than the " + std::to_string(bigwig_max_length) +
                         " bp a bigWig's 32-bit coordinates can hold; write bedGraph tracks "
                         "instead (--track-format bedgraph, with --bgzip for an indexed file)");
}

int BigWigWriter::add_sequence(const std::string& name, int64_t length) {
    check_bigwig_length(name, length);
    const auto found = impl_->index.find(name);
    if (found != impl_->index.end()) {
        const auto i = static_cast<size_t>(found->second);
        if (impl_->lengths[i] != static_cast<uint32_t>(length))
            throw InputError(
                impl_->path + ": sequence '" + name + "' appears with lengths " +
                std::to_string(impl_->lengths[i]) + " and " + std::to_string(length) +
                "; a bigWig lists each name once (two inputs with a record of that name?)");
        // libBigWig needs each sequence's intervals in one stretch, in list order.
        if (i + 1 != impl_->names.size())
            throw InputError(
                impl_->path + ": sequence '" + name +
                "' comes back after other sequences; a bigWig holds each sequence in one "
                "stretch (two inputs with a record of that name?)");
        return found->second;
    }
    impl_->names.push_back(name);
    impl_->lengths.push_back(static_cast<uint32_t>(length));
    const int i = static_cast<int>(impl_->names.size() - 1);
    impl_->index.emplace(name, i);
    return i;
}

void BigWigWriter::add(int sequence, int64_t start, int64_t end, double value) {
    const Record r{static_cast<uint32_t>(sequence), static_cast<uint32_t>(start),
                   static_cast<uint32_t>(end), static_cast<float>(value)};
    impl_->pending.push_back(r);
    if (impl_->pending.size() == size_t{1} << 16) impl_->spill();
}

void BigWigWriter::close() {
    write();
    commit();
}

void BigWigWriter::commit() {
    if (!impl_->staged) throw InternalError(impl_->path + ": BigWigWriter::commit before write");
    impl_->staged->commit();
    impl_->staged.reset();
}

bool BigWigWriter::empty() const {
    return impl_->names.empty();
}

void BigWigWriter::write() {
    // libBigWig divides by the list's size while writing the header (SIGFPE, no error).
    if (impl_->names.empty())
        throw InputError(
            impl_->path +
            ": no sequence was decoded, and a bigWig file needs at least one (a shard that got "
            "no record?); write bedGraph tracks, or use fewer shards than records");
    auto staged_path = std::make_unique<StagedPath>(impl_->path);
    StagedPath& staged = *staged_path;
    ::close(staged.release_fd());
    if (bwInit(1 << 17) != 0) throw IoError("libBigWig failed to initialise");
    bigWigFile_t* bw = bwOpen(staged.temp().c_str(), nullptr, "w");
    const auto fail = [&](const char* what) {
        if (bw) bwClose(bw);
        bwCleanup();
        throw IoError(impl_->path + ": cannot write bigWig (" + what + ")");
    };
    if (!bw) fail("open");
    if (bwCreateHdr(bw, 10) != 0) fail("header");
    std::vector<const char*> names;
    for (const auto& n : impl_->names) names.push_back(n.c_str());
    bw->cl =
        bwCreateChromList(names.data(), impl_->lengths.data(), static_cast<int64_t>(names.size()));
    if (!bw->cl || bwWriteHdr(bw) != 0) fail("sequence list");

    impl_->spill();
    std::rewind(impl_->spool);
    constexpr size_t batch = 1 << 16;
    std::vector<Record> records(batch);
    std::vector<uint32_t> starts, ends;
    std::vector<float> values;
    std::vector<const char*> chroms;
    int64_t current = -1;
    size_t got = 0;
    while ((got = std::fread(records.data(), sizeof(Record), batch, impl_->spool)) > 0) {
        size_t i = 0;
        while (i < got) {
            const uint32_t seq = records[i].sequence;
            starts.clear();
            ends.clear();
            values.clear();
            for (; i < got && records[i].sequence == seq; ++i) {
                starts.push_back(records[i].start);
                ends.push_back(records[i].end);
                values.push_back(records[i].value);
            }
            const auto n = static_cast<uint32_t>(starts.size());
            int rc = 0;
            if (static_cast<int64_t>(seq) != current) {
                chroms.assign(n, names[seq]);
                rc =
                    bwAddIntervals(bw, chroms.data(), starts.data(), ends.data(), values.data(), n);
                current = seq;
            } else {
                rc = bwAppendIntervals(bw, starts.data(), ends.data(), values.data(), n);
            }
            if (rc != 0) fail("intervals");
        }
    }
    if (std::ferror(impl_->spool)) fail("spool read");
    bwClose(bw);  // writes the zoom levels and the index
    bw = nullptr;
    bwCleanup();
    impl_->staged = std::move(staged_path);
}

struct BigWigReader::Impl {
    std::string path;
    bigWigFile_t* bw = nullptr;
    bool initialised = false;
    std::vector<Sequence> sequences;
    std::set<std::string> names;  // libBigWig fails on a name it does not list
};

BigWigReader::BigWigReader(std::string path) : impl_(std::make_unique<Impl>()) {
    Impl& m = *impl_;
    m.path = std::move(path);
    // libBigWig's own messages on a missing file are vague; name the file first.
    struct stat st {};
    if (stat(m.path.c_str(), &st) != 0 || !S_ISREG(st.st_mode))
        throw InputError(m.path + ": cannot open (no such bigWig file)");
    if (bwInit(1 << 17) != 0) throw IoError("libBigWig failed to initialise");
    m.initialised = true;
    if (!bwIsBigWig(m.path.c_str(), nullptr)) {
        bwCleanup();
        m.initialised = false;
        throw InputError(m.path + ": not a bigWig file");
    }
    m.bw = bwOpen(m.path.c_str(), nullptr, "r");
    if (!m.bw || !m.bw->cl) {
        if (m.bw) bwClose(m.bw);
        bwCleanup();
        m.initialised = false;
        throw InputError(m.path + ": cannot read the bigWig header (truncated or corrupt file?)");
    }
    for (int64_t i = 0; i < m.bw->cl->nKeys; ++i) {
        m.sequences.push_back({m.bw->cl->chrom[i], static_cast<int64_t>(m.bw->cl->len[i])});
        m.names.insert(m.sequences.back().name);
    }
}

BigWigReader::~BigWigReader() {
    if (impl_->bw) bwClose(impl_->bw);
    if (impl_->initialised) bwCleanup();
}

const std::string& BigWigReader::path() const {
    return impl_->path;
}

const std::vector<BigWigReader::Sequence>& BigWigReader::sequences() const {
    return impl_->sequences;
}

void BigWigReader::intervals(const std::string& name, int64_t begin, int64_t end,
                             const std::function<void(const Interval&)>& f) {
    if (end <= begin) return;
    if (!impl_->names.count(name)) return;
    if (begin < 0 || end > 0xFFFFFFFFll)
        throw InputError(impl_->path + ": " + name + " " + std::to_string(begin) + "-" +
                         std::to_string(end) + " is outside bigWig's 32-bit coordinates");
    const auto fail = [&] {
        return InputError(impl_->path + ": cannot read the intervals of '" + name +
                          "' (truncated or corrupt file?)");
    };
    // A few blocks at a time keeps memory small; each block holds at most a few thousand intervals.
    bwOverlapIterator_t* it = bwOverlappingIntervalsIterator(
        impl_->bw, name.c_str(), static_cast<uint32_t>(begin), static_cast<uint32_t>(end), 16);
    if (!it) throw fail();
    struct Guard {
        bwOverlapIterator_t*& it;
        ~Guard() { bwIteratorDestroy(it); }
    } guard{it};
    while (it->data) {
        const bwOverlappingIntervals_t* iv = it->intervals;
        for (uint32_t i = 0; i < iv->l; ++i) f({iv->start[i], iv->end[i], iv->value[i]});
        it = bwIteratorNext(it);  // destroys the iterator on error
        if (!it) throw fail();
    }
}

}  // namespace tidemark
