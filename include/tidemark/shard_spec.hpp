// Which share of the input a process decodes (--shard I/N): the option as scan and fit take it.
// The scale-out layer (shard.hpp) plans and reads the shares; the core jobs only carry the option.
#pragma once

#include <string>

namespace tidemark {

/// Shard I of N (1-based). count 0 means "no sharding": everything is decoded.
struct ShardSpec {
    int index = 0;  ///< 1..count
    int count = 0;  ///< 0 = not sharded
    bool active() const { return count > 0; }
};

/// Parses "I/N" with 1 <= I <= N <= 100000. Throws UsageError naming the text.
ShardSpec parse_shard(const std::string& text);

}  // namespace tidemark
