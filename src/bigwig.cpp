// bigWig input through libBigWig (output: bigwig_write.cpp). Its header declares global names (e.g.
// min, max), so it is included in this file only.
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

// libBigWig reads data blocks with zlib's uncompress() when bigWig files are read (merge):
// libdeflate inflates the same zlib streams about
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
// (bwGetTid), on every query: merge asks for each record's intervals, so reading back a bigWig
// of a draft with 300,000 contigs would take hours. This definition takes
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
