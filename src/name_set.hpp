// Internal: a set of names in compact storage, for duplicate checks over a whole input (a draft
// assembly can have millions of records): about 16 bytes per name plus its characters, where a
// std::unordered_set<std::string> needs about 70.
#pragma once

#include <algorithm>
#include <cstdint>
#include <cstring>
#include <string>
#include <string_view>
#include <vector>

namespace tidemark::detail {

class NameSet {
public:
    /// Adds the name; false when it was there already.
    bool insert(std::string_view name) {
        if (2 * (count_ + 1) > slots_.size()) grow();
        const uint64_t h = hash(name);
        for (size_t i = h & (slots_.size() - 1);; i = (i + 1) & (slots_.size() - 1)) {
            if (slots_[i] == 0) {
                slots_[i] = store(name);
                ++count_;
                return true;
            }
            if (stored(slots_[i]) == name) return false;
        }
    }
    /// True when the name was added.
    bool contains(std::string_view name) const {
        if (slots_.empty()) return false;
        for (size_t i = hash(name) & (slots_.size() - 1);; i = (i + 1) & (slots_.size() - 1)) {
            if (slots_[i] == 0) return false;
            if (stored(slots_[i]) == name) return true;
        }
    }
    size_t size() const { return count_; }

private:
    static uint64_t hash(std::string_view s) {  // FNV-1a 64 (Fowler, Noll, Vo; common practice)
        uint64_t h = 1469598103934665603ull;
        for (const unsigned char c : s) h = (h ^ c) * 1099511628211ull;
        return h ^ (h >> 29);
    }
    // Names are stored back to back, each after its length in 4 bytes; a slot holds the offset
    // of the length plus one (0 = empty).
    uint64_t store(std::string_view name) {
        const uint64_t at = chars_.size();
        const auto n = static_cast<uint32_t>(name.size());
        chars_.append(reinterpret_cast<const char*>(&n), sizeof n);
        chars_.append(name);
        return at + 1;
    }
    std::string_view stored(uint64_t slot) const {
        uint32_t n = 0;
        std::memcpy(&n, chars_.data() + slot - 1, sizeof n);
        return std::string_view(chars_.data() + slot - 1 + sizeof n, n);
    }
    void grow() {
        std::vector<uint64_t> old(std::max<size_t>(64, 2 * slots_.size()), 0);
        old.swap(slots_);
        for (const uint64_t slot : old) {
            if (slot == 0) continue;
            size_t i = hash(stored(slot)) & (slots_.size() - 1);
            while (slots_[i] != 0) i = (i + 1) & (slots_.size() - 1);
            slots_[i] = slot;
        }
    }

    std::vector<uint64_t> slots_;
    std::string chars_;
    size_t count_ = 0;
};

}  // namespace tidemark::detail
