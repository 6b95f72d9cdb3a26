// Closest names by edit distance, for "did you mean" messages.
#include "tidemark/suggest.hpp"

#include <algorithm>
#include <cctype>
#include <numeric>

namespace tidemark {
namespace {

char fold(char c) {
    return c == '_' ? '-' : static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
}

bool is_prefix(const std::string& a, const std::string& b) {  // a starts b
    return a.size() < b.size() && std::equal(a.begin(), a.end(), b.begin(),
                                             [](char x, char y) { return fold(x) == fold(y); });
}

}  // namespace

size_t edit_distance(const std::string& a, const std::string& b) {
    const size_t n = a.size(), m = b.size();
    // Three rows of the optimal-string-alignment table: i-2, i-1, i.
    std::vector<size_t> before(m + 1), previous(m + 1), current(m + 1);
    std::iota(previous.begin(), previous.end(), size_t{0});
    for (size_t i = 1; i <= n; ++i) {
        current[0] = i;
        for (size_t j = 1; j <= m; ++j) {
            const bool same = fold(a[i - 1]) == fold(b[j - 1]);
            current[j] =
                std::min({previous[j] + 1, current[j - 1] + 1, previous[j - 1] + (same ? 0 : 1)});
            if (i > 1 && j > 1 && fold(a[i - 1]) == fold(b[j - 2]) &&
                fold(a[i - 2]) == fold(b[j - 1]))
                current[j] = std::min(current[j], before[j - 2] + 1);
        }
        std::swap(before, previous);
        std::swap(previous, current);
    }
    return previous[m];
}

std::vector<std::string> closest_names(const std::string& word,
                                       const std::vector<std::string>& candidates, size_t limit,
                                       bool close_only) {
    std::vector<std::pair<size_t, size_t>> ranked;  // (distance, index)
    const size_t near = std::max<size_t>(1, word.size() / 3);
    for (size_t i = 0; i < candidates.size(); ++i) {
        const std::string& c = candidates[i];
        const size_t d = edit_distance(word, c);
        if (d == 0 && word == c) continue;
        const bool prefix = word.size() >= 2 && (is_prefix(word, c) || is_prefix(c, word));
        if (close_only && d > near && !prefix) continue;
        ranked.emplace_back(prefix ? std::min(d, near) : d, i);
    }
    std::stable_sort(ranked.begin(), ranked.end());
    std::vector<std::string> out;
    for (const auto& [d, i] : ranked) {
        if (out.size() == limit) break;
        out.push_back(candidates[i]);
    }
    return out;
}

std::string did_you_mean(const std::string& word, const std::vector<std::string>& candidates) {
    const std::vector<std::string> close = closest_names(word, candidates, 2);
    if (close.empty()) return "";
    std::string out = "; did you mean '" + close[0] + "'";
    if (close.size() > 1) out += " or '" + close[1] + "'";
    return out + "?";
}

}  // namespace tidemark
