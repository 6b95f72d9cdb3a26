// bigWig output written by tidemark itself. Format: Kent WJ, Zweig AS, Barber G, Hinrichs AS,
// Karolchik D (2010) "BigWig and BigBed: enabling browsing of large distributed datasets",
// Bioinformatics 26:2204-2207, and its supplementary format description. The layout choices are
// the ones libBigWig made for tidemark before (bedGraph-type sections of at most 2728 items, a
// new block per sequence, an R-tree of 64 children per node, zoom levels from 16 times the mean
// interval width in steps of 4, zoom blocks of 1023 records), so values and zoom statistics read
// back as before.
//
// Data blocks are compressed by a task pool while intervals arrive and written in order to a
// spool; at write() the zoom levels are built from the uncompressed blocks (one task per level,
// which also compresses that level's blocks), and the file is assembled: header, zoom headers,
// total summary, sequence list, data, index, zoom levels. The sequence list comes before the data
// because some readers (igv.js) load everything between the header and the data in one piece.
// Compressed bytes depend only on the block contents, so files are identical for any thread
// count.
#include <libdeflate.h>
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <cstring>
#include <deque>
#include <future>
#include <map>
#include <memory>
#include <numeric>
#include <string>
#include <vector>

#include "tidemark/error.hpp"
#include "tidemark/output.hpp"
#include "tidemark/thread_pool.hpp"
#include "tidemark/track.hpp"

namespace tidemark {

namespace {

constexpr uint32_t bigwig_magic = 0x888FFC26;
constexpr uint32_t sequence_tree_magic = 0x78CA8C91;  // B+ tree
constexpr uint32_t index_magic = 0x2468ACE0;          // R-tree
constexpr uint32_t block_bytes = 32768;               // the header's uncompressBufSize
constexpr uint32_t data_header_bytes = 24;
constexpr uint32_t item_bytes = 12;  // bedGraph-type item: start, end, value
constexpr uint32_t items_per_block = (block_bytes - data_header_bytes) / item_bytes;  // 2728
constexpr uint32_t zoom_record_bytes = 32;
constexpr uint32_t zoom_records_per_block = block_bytes / zoom_record_bytes - 1;  // 1023
constexpr uint32_t index_children = 64;
constexpr uint32_t sequence_tree_children = 256;  // UCSC's tools' block size (from memory)
constexpr int max_zoom_levels = 10;
constexpr uint64_t header_bytes = 64;
constexpr uint64_t summary_offset = header_bytes + 24 * max_zoom_levels;
constexpr uint64_t sequence_tree_offset = summary_offset + 40;

// Little-endian fields appended to a byte string.
struct Bytes {
    std::string s;
    template <class T>
    void put(T value) {
        char b[sizeof(T)];
        std::memcpy(b, &value, sizeof(T));
        s.append(b, sizeof(T));
    }
    void zeros(size_t n) { s.append(n, '\0'); }
    // The head of a node of either tree (R-tree or B+ tree): leaf flag, reserved byte, count.
    void node_head(bool leaf, size_t count) {
        put(static_cast<uint8_t>(leaf ? 1 : 0));
        put(uint8_t{0});
        put(static_cast<uint16_t>(count));
    }
};
static_assert(__BYTE_ORDER__ == __ORDER_LITTLE_ENDIAN__, "bigWig fields are written as stored");

// A block's place in the R-tree: its first and last positions and where it is in the file.
struct BlockEntry {
    uint32_t first_sequence = 0, first_start = 0, last_sequence = 0, last_end = 0;
    uint64_t offset = 0, size = 0;
};

// zlib format (what bigWig readers inflate) at libdeflate level 1: on chrX half the time of
// level 6 for a file 5% larger.
std::string deflate(const std::string& raw) {
    thread_local std::unique_ptr<libdeflate_compressor, void (*)(libdeflate_compressor*)>
        compressor(libdeflate_alloc_compressor(1), libdeflate_free_compressor);
    if (!compressor) throw IoError("cannot allocate a compressor for a bigWig block");
    std::string out(libdeflate_zlib_compress_bound(compressor.get(), raw.size()), '\0');
    const size_t n =
        libdeflate_zlib_compress(compressor.get(), raw.data(), raw.size(), out.data(), out.size());
    if (n == 0) throw InternalError("a bigWig block did not fit its compression bound");
    out.resize(n);
    return out;
}

// The R-tree over blocks in file order (sorted by sequence and position), written at file offset
// `at`: leaves of up to index_children blocks, each level above grouping as many nodes, root
// first and leaves last.
std::string index_section(const std::vector<BlockEntry>& blocks, uint64_t at,
                          uint32_t items_per_slot, uint64_t end_of_data) {
    struct Bounds {
        uint32_t a, b, c, d;
    };
    std::vector<std::vector<Bounds>> items(1);
    for (const auto& e : blocks)
        items[0].push_back({e.first_sequence, e.first_start, e.last_sequence, e.last_end});
    // items[h + 1]: the bounds of the nodes of level h, which hold items[h].
    while (items.back().size() > index_children) {
        const auto& below = items.back();
        std::vector<Bounds> nodes;
        for (size_t i = 0; i < below.size(); i += index_children) {
            const size_t last = std::min(below.size(), i + index_children) - 1;
            nodes.push_back({below[i].a, below[i].b, below[last].c, below[last].d});
        }
        items.push_back(std::move(nodes));
    }
    const size_t height = items.size();  // levels of nodes; level height - 1 is the root
    const auto item_size = [](size_t level) -> uint64_t { return level == 0 ? 32 : 24; };
    const auto nodes_of = [&](size_t level) {
        return std::max<size_t>(1, (items[level].size() + index_children - 1) / index_children);
    };
    std::vector<uint64_t> level_start(height);
    uint64_t offset = at + 48;
    for (size_t h = height; h-- > 0;) {
        level_start[h] = offset;
        offset += 4 * nodes_of(h) + item_size(h) * items[h].size();
    }
    Bytes out;
    out.put(index_magic);
    out.put(index_children);
    out.put(static_cast<uint64_t>(blocks.size()));
    const Bounds all = blocks.empty() ? Bounds{0, 0, 0, 0}
                                      : Bounds{items[0].front().a, items[0].front().b,
                                               items[0].back().c, items[0].back().d};
    out.put(all.a);
    out.put(all.b);
    out.put(all.c);
    out.put(all.d);
    out.put(end_of_data);
    out.put(items_per_slot);
    out.put(uint32_t{0});
    for (size_t h = height; h-- > 0;) {
        const auto& level = items[h];
        const size_t nodes = nodes_of(h);
        for (size_t n = 0; n < nodes; ++n) {
            const size_t first = n * index_children;
            const size_t count = std::min<size_t>(index_children, level.size() - first);
            out.node_head(h == 0, count);
            for (size_t i = first; i < first + count; ++i) {
                out.put(level[i].a);
                out.put(level[i].b);
                out.put(level[i].c);
                out.put(level[i].d);
                if (h == 0) {
                    out.put(blocks[i].offset);
                    out.put(blocks[i].size);
                } else {
                    // Child i of this level is node i of the level below; all but a level's last
                    // node are full.
                    const uint64_t full = 4 + item_size(h - 1) * index_children;
                    out.put(level_start[h - 1] + full * i);
                }
            }
        }
    }
    return std::move(out.s);
}

// The sequence list as a B+ tree keyed by name (sorted, as readers that search it expect);
// each leaf item gives the sequence's number (its place in the file's list) and length. Nodes are
// padded to the block size.
std::string sequence_tree(const std::vector<std::string>& names,
                          const std::vector<uint32_t>& lengths, uint64_t at) {
    const size_t n = names.size();
    const uint32_t block = static_cast<uint32_t>(std::min<size_t>(n, sequence_tree_children));
    size_t key_size = 1;
    for (const auto& name : names) key_size = std::max(key_size, name.size());
    std::vector<uint32_t> order(n);
    std::iota(order.begin(), order.end(), 0);
    std::sort(order.begin(), order.end(),
              [&](uint32_t x, uint32_t y) { return names[x] < names[y]; });
    // keys[h]: the first sorted index under each item of level h (level 0: the leaves' items).
    std::vector<std::vector<uint32_t>> keys(1, order);
    while (keys.back().size() > block) {
        std::vector<uint32_t> up;
        for (size_t i = 0; i < keys.back().size(); i += block) up.push_back(keys.back()[i]);
        keys.push_back(std::move(up));
    }
    const size_t height = keys.size();
    const uint64_t node_size = 4 + uint64_t{block} * (key_size + 8);
    const auto nodes_of = [&](size_t h) { return (keys[h].size() + block - 1) / block; };
    std::vector<uint64_t> level_start(height);
    uint64_t offset = at + 32;
    for (size_t h = height; h-- > 0;) {
        level_start[h] = offset;
        offset += node_size * nodes_of(h);
    }
    Bytes out;
    out.put(sequence_tree_magic);
    out.put(block);
    out.put(static_cast<uint32_t>(key_size));
    out.put(uint32_t{8});
    out.put(static_cast<uint64_t>(n));
    out.put(uint64_t{0});
    const auto key = [&](uint32_t sequence) {
        std::string k = names[sequence];
        k.resize(key_size, '\0');
        return k;
    };
    for (size_t h = height; h-- > 0;) {
        const auto& level = keys[h];
        for (size_t node = 0; node < nodes_of(h); ++node) {
            const size_t first = node * block;
            const size_t count = std::min<size_t>(block, level.size() - first);
            out.node_head(h == 0, count);
            for (size_t i = first; i < first + count; ++i) {
                out.s += key(level[i]);
                if (h == 0) {
                    out.put(level[i]);
                    out.put(lengths[level[i]]);
                } else {
                    out.put(level_start[h - 1] + node_size * i);
                }
            }
            out.zeros((block - count) * (key_size + 8));
        }
    }
    return std::move(out.s);
}

// One zoom level, summarised exactly as libBigWig 0.4.7 did for tidemark (bwWrite.c,
// addIntervalValue and updateInterval), so that readers' zoom statistics stay the same: a record
// starts at the first base of an interval that does not overlap the open record's `size` bases
// and covers at most `size` bases from there; a block holds 1023 records. Unlike libBigWig,
// the last record of each block and of the level gets its sum and sum of squares too (libBigWig
// stores them only when the next record starts, so readers saw a mean of 0 there).
class ZoomLevel {
public:
    explicit ZoomLevel(uint32_t size) : size_(size) {}
    uint32_t size() const { return size_; }

    void add(uint32_t sequence, uint32_t start, uint32_t end, float value) {
        while (start < end) {
            uint32_t covered = update(sequence, start, end, value);
            if (covered == 0) {  // the block is full
                finish_block();
                covered = update(sequence, start, end, value);
            }
            start += covered;
        }
    }
    // The items of one uncompressed data block. An item inside the open record (the common case
    // at every level but the finest) is summed in registers; add() handles the rest.
    void add_items(uint32_t sequence, const char* item, size_t n) {
        double sum = sum_, sum_squares = sum_squares_;
        for (size_t i = 0; i < n; ++i, item += item_bytes) {
            uint32_t start, end;
            float value;
            std::memcpy(&start, item, 4);
            std::memcpy(&end, item + 4, 4);
            std::memcpy(&value, item + 8, 4);
            if (!records_.empty() && records_.size() < zoom_records_per_block) {
                Record& open = records_.back();
                // Inside the open record, with no size to cap: update() would do just this.
                if (open.sequence == sequence && open.start <= start &&
                    start <= 0xFFFFFFFFu - size_ && end <= open.start + size_) {
                    extend(open, start, end - start, value, sum, sum_squares);
                    continue;
                }
            }
            sum_ = sum;
            sum_squares_ = sum_squares;
            add(sequence, start, end, value);
            sum = sum_;
            sum_squares = sum_squares_;
        }
        sum_ = sum;
        sum_squares_ = sum_squares;
    }
    void finish() {
        if (!records_.empty()) finish_block();
    }
    const std::vector<std::string>& blocks() const { return packed_; }
    const std::vector<BlockEntry>& entries() const { return entries_; }

private:
    struct Record {
        uint32_t sequence, start, end, covered;
        float min, max, sum, sum_squares;
    };
    static uint32_t overlap(uint32_t seq0, uint32_t start0, uint32_t end0, uint32_t seq1,
                            uint32_t start1, uint32_t end1) {
        if (seq0 != seq1 || end0 <= start1 || end1 <= start0) return 0;
        return std::min(end0, end1) - std::max(start0, start1);
    }
    static void add_sums(uint32_t covered, float value, double& sum, double& sum_squares) {
        sum += static_cast<double>(static_cast<float>(covered) * value);  // float product, as C
        const double v = value;
        sum_squares += static_cast<double>(covered) * (v * v);
    }
    // The open record takes `covered` bases of value from `start` on.
    static void extend(Record& open, uint32_t start, uint32_t covered, float value, double& sum,
                       double& sum_squares) {
        open.end = start + covered;
        open.covered += covered;
        if (open.min > value) open.min = value;
        if (open.max < value) open.max = value;
        add_sums(covered, value, sum, sum_squares);
    }
    uint32_t update(uint32_t sequence, uint32_t start, uint32_t end, float value) {
        if (records_.size() == zoom_records_per_block) return 0;
        uint32_t size = size_;
        if (start + size < start) size = 0xFFFFFFFFu - start;
        if (!records_.empty()) {
            Record& open = records_.back();
            const uint32_t covered =
                overlap(open.sequence, open.start, open.start + size, sequence, start, end);
            if (covered) {
                extend(open, start, covered, value, sum_, sum_squares_);
                return covered;
            }
            open.sum = static_cast<float>(sum_);
            open.sum_squares = static_cast<float>(sum_squares_);
            sum_ = sum_squares_ = 0;
        }
        const uint32_t stop = start + size < end ? start + size : end;
        const uint32_t covered = overlap(sequence, start, start + size, sequence, start, end);
        records_.push_back({sequence, start, stop, covered, value, value, 0.0f, 0.0f});
        add_sums(covered, value, sum_, sum_squares_);
        return covered;
    }
    void finish_block() {
        records_.back().sum = static_cast<float>(sum_);
        records_.back().sum_squares = static_cast<float>(sum_squares_);
        sum_ = sum_squares_ = 0;
        Bytes raw;
        for (const Record& r : records_) {
            raw.put(r.sequence);
            raw.put(r.start);
            raw.put(r.end);
            raw.put(r.covered);
            raw.put(r.min);
            raw.put(r.max);
            raw.put(r.sum);
            raw.put(r.sum_squares);
        }
        BlockEntry e;
        e.first_sequence = records_.front().sequence;
        e.first_start = records_.front().start;
        e.last_sequence = records_.back().sequence;
        e.last_end = records_.back().end;
        packed_.push_back(deflate(raw.s));
        e.size = packed_.back().size();
        entries_.push_back(e);
        records_.clear();
    }

    uint32_t size_;
    std::vector<Record> records_;  // the open block
    double sum_ = 0, sum_squares_ = 0;
    std::vector<std::string> packed_;
    std::vector<BlockEntry> entries_;  // offsets relative to the level's first block
};

// The zoom levels libBigWig 0.4.7 chose (bwWrite.c, makeZoomLevels): the first is 16 times the
// truncated mean interval width (at least 10, at most the longest sequence), each next 4 times
// the previous, up to 10 levels, none beyond the longest sequence.
std::vector<uint32_t> zoom_sizes(uint64_t intervals, uint64_t width_sum, uint32_t longest) {
    std::vector<uint32_t> sizes;
    if (intervals == 0) return sizes;
    uint32_t mean =
        static_cast<uint32_t>(static_cast<double>(width_sum) / static_cast<double>(intervals));
    mean *= 4;
    if ((0xFFFFFFFFu >> 2) < mean) return sizes;
    uint32_t zoom = 10;
    if (mean * 4 > zoom) zoom = 4 * mean;
    if (zoom > longest) zoom = longest;
    for (int i = 0; i < max_zoom_levels; ++i) {
        if (zoom > longest) break;
        sizes.push_back(zoom);
        if (0xFFFFFFFFu / 4 < zoom) break;
        zoom *= 4;
    }
    return sizes;
}

struct Spool {
    std::FILE* file = nullptr;
    Spool() : file(std::tmpfile()) {}
    ~Spool() {
        if (file) std::fclose(file);
    }
    Spool(const Spool&) = delete;
    Spool& operator=(const Spool&) = delete;
};

}  // namespace

struct BigWigWriter::Impl {
    std::string path;
    std::vector<std::string> names;
    std::vector<uint32_t> lengths;
    std::map<std::string, int> index;    // name -> place in names
    std::unique_ptr<StagedPath> staged;  // written, not yet committed
    TaskPool pool;

    // The open data block.
    Bytes block;
    uint32_t block_sequence = 0, block_start = 0, block_end = 0, block_items = 0;
    // Blocks being compressed, in file order.
    struct Pending {
        std::future<void> done;
        std::shared_ptr<std::string> packed;
        BlockEntry entry;
    };
    std::deque<Pending> pending;
    std::vector<BlockEntry> blocks;  // offsets relative to the first block
    uint64_t data_bytes = 0;
    Spool data;  // compressed blocks, in order
    Spool raw;   // uncompressed blocks, for the zoom levels

    // Total summary, with libBigWig's arithmetic for the sums.
    uint64_t intervals = 0, bases = 0;
    double sum = 0, sum_squares = 0;
    float min = 0, max = 0;

    Impl(std::string p, int threads) : path(std::move(p)), pool(std::max(1, threads)) {}

    IoError spool_error() const { return IoError(path + ": cannot write a temporary spool file"); }

    // Writes the compressed blocks that are done, in order, waiting while more than `keep` wait.
    void write_ready(size_t keep) {
        while (!pending.empty()) {
            Pending& p = pending.front();
            if (pending.size() <= keep &&
                p.done.wait_for(std::chrono::seconds(0)) != std::future_status::ready)
                return;
            p.done.get();
            p.entry.offset = data_bytes;
            p.entry.size = p.packed->size();
            if (std::fwrite(p.packed->data(), 1, p.packed->size(), data.file) != p.packed->size())
                throw spool_error();
            data_bytes += p.packed->size();
            blocks.push_back(p.entry);
            pending.pop_front();
        }
    }

    void finish_block() {
        if (block_items == 0) return;
        char* h = block.s.data();
        const uint32_t zero = 0;
        const uint8_t type = 1;  // bedGraph items
        const auto items = static_cast<uint16_t>(block_items);
        std::memcpy(h, &block_sequence, 4);
        std::memcpy(h + 4, &block_start, 4);
        std::memcpy(h + 8, &block_end, 4);
        std::memcpy(h + 12, &zero, 4);  // step
        std::memcpy(h + 16, &zero, 4);  // span
        std::memcpy(h + 20, &type, 1);
        std::memcpy(h + 22, &items, 2);
        if (std::fwrite(block.s.data(), 1, block.s.size(), raw.file) != block.s.size())
            throw spool_error();
        Pending p;
        p.entry.first_sequence = p.entry.last_sequence = block_sequence;
        p.entry.first_start = block_start;
        p.entry.last_end = block_end;
        p.packed = std::make_shared<std::string>();
        auto text = std::make_shared<std::string>(std::move(block.s));
        p.done = pool.submit([text, out = p.packed](int) { *out = deflate(*text); });
        pending.push_back(std::move(p));
        block.s.clear();
        block_items = 0;
        write_ready(4 * static_cast<size_t>(pool.threads()));
    }
};

BigWigWriter::BigWigWriter(std::string path, int threads)
    : impl_(std::make_unique<Impl>(std::move(path), threads)) {
    if (!impl_->data.file || !impl_->raw.file)
        throw IoError(impl_->path + ": cannot create a temporary spool file");
}

BigWigWriter::~BigWigWriter() {
    // Compression tasks hold their own copies of what they read and write.
    for (auto& p : impl_->pending)
        if (p.done.valid()) p.done.wait();
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
        // The data section holds each sequence's intervals in one stretch, in list order.
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
    Impl& m = *impl_;
    const auto seq = static_cast<uint32_t>(sequence);
    const auto s = static_cast<uint32_t>(start), e = static_cast<uint32_t>(end);
    const auto v = static_cast<float>(value);
    if (m.block_items > 0 && (seq != m.block_sequence || m.block_items == items_per_block))
        m.finish_block();
    if (m.block_items == 0) {
        m.block.s.reserve(block_bytes);
        m.block.zeros(data_header_bytes);
        m.block_sequence = seq;
        m.block_start = s;
    }
    m.block.put(s);
    m.block.put(e);
    m.block.put(v);
    m.block_end = e;
    ++m.block_items;
    const uint32_t span = e - s;
    if (m.intervals == 0) m.min = m.max = v;
    m.min = std::min(m.min, v);
    m.max = std::max(m.max, v);
    ++m.intervals;
    m.bases += span;
    m.sum += static_cast<double>(static_cast<float>(span) * v);  // float product, as libBigWig
    m.sum_squares += static_cast<double>(span) * (static_cast<double>(v) * v);
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
    Impl& m = *impl_;
    if (m.names.empty())
        throw InputError(
            m.path +
            ": no sequence was decoded, and a bigWig file needs at least one (a shard that got "
            "no record?); write bedGraph tracks, or use fewer shards than records");
    m.finish_block();
    m.write_ready(0);
    if (std::fflush(m.data.file) != 0 || std::fflush(m.raw.file) != 0) throw m.spool_error();

    // Zoom levels from the uncompressed blocks, one task per level.
    const uint32_t longest = *std::max_element(m.lengths.begin(), m.lengths.end());
    std::vector<ZoomLevel> levels;
    for (uint32_t size : zoom_sizes(m.intervals, m.bases, longest)) {
        levels.emplace_back(size);
        // Records of a level start at least `size` bases apart within a sequence until a block
        // fills, so with fewer than a block's worth possible this level has one block, the next
        // would have one too, and the levels written stop here (see below): no need to build it.
        uint64_t most = 0;
        for (uint32_t length : m.lengths)
            if (length > 0) most += (length - 1) / size + 1;
        if (most < zoom_records_per_block) break;
    }
    if (!levels.empty() && !m.blocks.empty()) {
        // Each level reads the spool on its own (pread, from the page cache) and finishes its
        // blocks, so the levels never wait for each other.
        const int fd = fileno(m.raw.file);
        const std::string path = m.path;
        std::vector<std::future<void>> done;
        for (auto& level : levels)
            done.push_back(m.pool.submit([&level, fd, &path](int) {
                const size_t room = size_t{block_bytes} * 128;
                const auto stretch = std::make_unique_for_overwrite<char[]>(room);
                off_t offset = 0;
                for (;;) {
                    const ssize_t got = pread(fd, stretch.get(), room, offset);
                    if (got < 0) throw IoError(path + ": cannot read a temporary spool file");
                    if (got == 0) break;
                    const auto have = static_cast<size_t>(got);
                    // Whole blocks only: a cut block at the end is read again with the next.
                    size_t at = 0;
                    while (at + data_header_bytes <= have) {
                        uint32_t sequence;
                        uint16_t items;
                        std::memcpy(&sequence, stretch.get() + at, 4);
                        std::memcpy(&items, stretch.get() + at + 22, 2);
                        const size_t size = data_header_bytes + size_t{items} * item_bytes;
                        if (at + size > have) break;
                        level.add_items(sequence, stretch.get() + at + data_header_bytes, items);
                        at += size;
                    }
                    if (at == 0) throw IoError(path + ": a temporary spool file is damaged");
                    offset += static_cast<off_t>(at);
                }
                level.finish();
            }));
        wait_all(done);
        // libBigWig writes levels while each has another number of blocks than the one before.
        size_t kept = 1;
        while (kept < levels.size() &&
               levels[kept].blocks().size() != levels[kept - 1].blocks().size())
            ++kept;
        levels.erase(levels.begin() + static_cast<std::ptrdiff_t>(kept), levels.end());
    } else {
        levels.clear();
    }

    // Sections in file order.
    const std::string tree = sequence_tree(m.names, m.lengths, sequence_tree_offset);
    const uint64_t data_offset = sequence_tree_offset + tree.size();
    const uint64_t first_block = data_offset + 8;
    const uint64_t index_offset = first_block + m.data_bytes;
    std::vector<BlockEntry> entries = m.blocks;
    for (auto& e : entries) e.offset += first_block;
    const std::string index = index_section(entries, index_offset, 1, index_offset);
    uint64_t at = index_offset + index.size();
    std::vector<std::string> zoom_sections;
    std::vector<std::pair<uint64_t, uint64_t>> zoom_offsets;  // data, index
    for (const auto& level : levels) {
        const uint64_t level_data = at;
        Bytes section;
        section.put(static_cast<uint32_t>(level.blocks().size()));
        std::vector<BlockEntry> level_entries = level.entries();
        for (size_t i = 0; i < level.blocks().size(); ++i) {
            level_entries[i].offset = level_data + section.s.size();
            section.s += level.blocks()[i];
        }
        const uint64_t level_index = level_data + section.s.size();
        section.s +=
            index_section(level_entries, level_index, block_bytes / zoom_record_bytes, level_index);
        zoom_offsets.emplace_back(level_data, level_index);
        at += section.s.size();
        zoom_sections.push_back(std::move(section.s));
    }

    Bytes head;
    head.put(bigwig_magic);
    head.put(uint16_t{4});  // version
    head.put(static_cast<uint16_t>(levels.size()));
    head.put(sequence_tree_offset);
    head.put(data_offset);
    head.put(index_offset);
    head.put(uint16_t{0});  // field count (bigBed only)
    head.put(uint16_t{0});  // defined field count
    head.put(uint64_t{0});  // autoSql offset
    head.put(summary_offset);
    head.put(block_bytes);
    head.put(uint64_t{0});  // extension offset
    for (size_t i = 0; i < levels.size(); ++i) {
        head.put(levels[i].size());
        head.put(uint32_t{0});
        head.put(zoom_offsets[i].first);
        head.put(zoom_offsets[i].second);
    }
    head.zeros(summary_offset - head.s.size());
    head.put(m.bases);
    head.put(static_cast<double>(m.min));
    head.put(static_cast<double>(m.max));
    head.put(m.sum);
    head.put(m.sum_squares);
    head.s += tree;
    head.put(static_cast<uint64_t>(m.blocks.size()));

    auto staged_path = std::make_unique<StagedPath>(m.path);
    const int fd = staged_path->release_fd();
    std::FILE* out = fdopen(fd, "wb");
    if (!out) {
        ::close(fd);
        throw IoError(m.path + ": cannot open the temporary output file");
    }
    const auto put = [&](const std::string& s) {
        if (std::fwrite(s.data(), 1, s.size(), out) != s.size()) {
            std::fclose(out);
            throw IoError(m.path + ": cannot write bigWig (disk full?)");
        }
    };
    put(head.s);
    std::rewind(m.data.file);
    std::string buffer(size_t{1} << 20, '\0');
    size_t got = 0;
    uint64_t copied = 0;
    while ((got = std::fread(buffer.data(), 1, buffer.size(), m.data.file)) > 0) {
        buffer.resize(got);
        put(buffer);
        copied += got;
        buffer.resize(size_t{1} << 20);
    }
    if (std::ferror(m.data.file) || copied != m.data_bytes) {
        std::fclose(out);
        throw IoError(m.path + ": cannot read a temporary spool file");
    }
    put(index);
    for (const auto& s : zoom_sections) put(s);
    Bytes end;
    end.put(bigwig_magic);
    put(end.s);
    if (std::fclose(out) != 0) throw IoError(m.path + ": cannot write bigWig (disk full?)");
    m.staged = std::move(staged_path);
}

}  // namespace tidemark
