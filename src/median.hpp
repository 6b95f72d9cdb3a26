// Internal: the median of a sample, as numpy.median gives it.
#pragma once

#include <algorithm>
#include <cstddef>
#include <limits>
#include <vector>

namespace tidemark::detail {

/// The middle value, or of an even count the mean of the two middle values (numpy.median);
/// NaN for an empty sample. Reorders v.
template <class T>
double median_in_place(std::vector<T>& v) {
    if (v.empty()) return std::numeric_limits<double>::quiet_NaN();
    const size_t mid = v.size() / 2;
    const auto at = v.begin() + static_cast<std::ptrdiff_t>(mid);
    std::nth_element(v.begin(), at, v.end());
    const auto upper = static_cast<double>(*at);
    if (v.size() % 2) return upper;
    return (static_cast<double>(*std::max_element(v.begin(), at)) + upper) / 2;
}

}  // namespace tidemark::detail
