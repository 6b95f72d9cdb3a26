// Profiles: region-type HMMs in tidemark's JSON format (tidemark-profile/1), their validation,
// the built-in set, and compilation into the flat Model that the decoders run on.
#pragma once

#include <array>
#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

namespace tidemark {

inline constexpr const char* profile_format = "tidemark-profile/1";
inline constexpr int max_emission_order = 5;
/// Upper bound on the number of compiled states (duration chains included): the decoders also
/// keep a dense S x S transition matrix, 32 MiB at this size.
inline constexpr int max_compiled_states = 2048;

/// A region type: what a call is named after. Several states may belong to one region.
struct RegionSpec {
    std::string name;
    bool report = false;      ///< calls and tracks are made for reportable regions only
    std::string description;  ///< optional free text
    std::string color;        ///< optional "R,G,B" for browser tracks ("" = tidemark's palette)
    /// Shortest possible segment (a maximal run of this region's states), in bases. L > 1 is
    /// compiled into a chain of L copies of each of the region's states: copies 1..L-1 can only
    /// step to the next copy (of any state of the region, with the in-region transitions
    /// renormalised), copy L has the state's own transitions, so after the chain the length is
    /// geometric. A segment cut by the end of a contig may be shorter.
    int64_t min_length = 1;
};

/// A hidden state with an order-k context model: emissions[ctx][base] = P(base | k preceding
/// bases), ctx indexing the k preceding bases with A<C<G<T and the oldest most significant.
struct StateSpec {
    std::string name;
    int region = 0;  ///< index into Profile::regions
    int order = 0;   ///< 0..max_emission_order
    std::vector<std::array<double, 4>> emissions;  ///< 4^order rows, each summing to 1
    /// Tie group: states that name the same non-empty group share one emission table (same
    /// order, identical rows), and training estimates it from their pooled counts.
    std::string tie;
};

/// Interval-calling defaults a profile may carry (overridden by command-line options).
struct CallingDefaults {
    double min_posterior = 0.5;
    int64_t min_length = 1;
    int64_t merge_gap = 0;
};

/// A validated profile as written in its file.
struct Profile {
    std::string name;
    std::string description;
    std::vector<std::string> sources;  ///< where the numbers come from
    std::vector<RegionSpec> regions;
    std::vector<StateSpec> states;
    std::vector<double> initial;                   ///< per state, sums to 1
    std::vector<std::vector<double>> transitions;  ///< [from][to], each row sums to 1
    CallingDefaults calling;
    std::string provenance_json;  ///< optional free-form object kept verbatim ("" when absent)

    int state_index(std::string_view state) const;    ///< -1 when absent
    int region_index(std::string_view region) const;  ///< -1 when absent
};

/// Parses and validates profile JSON. origin names the source in error messages.
/// Throws ProfileError naming the offending field: unknown or missing fields, rows that do not
/// sum to 1 within 1e-6, negative or non-finite values, unresolved names, an order outside
/// 0..5, no reportable region; a region min_length below 1, a chain region whose state cannot
/// stay in the region, more than max_compiled_states compiled states; tied states that differ
/// in order or emissions.
/// Optional fields: regions[].min_length (default 1) and states[].tie (default none).
Profile parse_profile(std::string_view json_text, const std::string& origin);

/// Canonical JSON text of a profile (stable key order; parse_profile(to_json(p)) == p).
std::string to_json(const Profile& profile);

/// CRC-32 of the profile's canonical JSON (to_json), 8 hex digits: recorded by scan, checked by merge.
std::string profile_checksum(const Profile& profile);

/// A profile compiled into the binary from data/profiles/NAME.json.
struct BuiltinProfile {
    std::string_view name;
    std::string_view json;
};
const std::vector<BuiltinProfile>& builtin_profiles();

/// A built-in by name, otherwise a file path. Throws ProfileError when neither exists.
Profile load_profile(const std::string& name_or_path);

/// The flattened model: dense and sparse transitions, per-state emission tables with a
/// precomputed mean row (used where fewer than k known bases precede a position).
struct Model {
    int states = 0;
    int max_order = 0;
    std::string name;
    std::vector<std::string> state_names;  ///< chain copies are named "state[c/L]"
    std::vector<std::string> region_names;
    std::vector<bool> region_report;
    std::vector<std::string> region_colors;  ///< "R,G,B" or "" (use tidemark's palette)
    std::vector<int> region_of_state;
    std::vector<int> order_of_state;
    /// Per compiled state: the profile state it copies, its place c (1..L) in its region's
    /// min_length chain and the chain length L (1 for regions without a chain).
    std::vector<int> profile_state;
    std::vector<int> chain_copy;
    std::vector<int> chain_length;
    std::vector<double> initial;      ///< S
    std::vector<double> transitions;  ///< S*S row-major, [from*S + to]

    /// Non-zero transitions into each state (CSR: in_begin has S+1 entries).
    std::vector<int> in_begin, in_from;
    std::vector<double> in_prob;
    /// Non-zero transitions out of each state.
    std::vector<int> out_begin, out_to;
    std::vector<double> out_prob;

    /// Per state, 4^k + 1 rows of 4 probabilities; row 4^k is the mean row. Chain copies share
    /// the table of the profile state they copy.
    std::vector<size_t> emission_offset;
    std::vector<double> emission;

    /// P(base | context) for state s; valid = number of consecutive known bases before the
    /// position, ctx = rolling code of the preceding bases (newest in the low 2 bits).
    double emission_prob(int s, uint32_t ctx, int64_t valid, uint8_t base) const {
        const int k = order_of_state[s];
        const uint32_t row = valid >= k ? (ctx & ((1u << (2 * k)) - 1)) : (1u << (2 * k));
        return emission[emission_offset[s] + row * 4 + base];
    }
};

/// Compiles a validated profile: expands min_length chains (a region with L > 1 turns each of
/// its n states into L compiled states, so S grows to sum of L per state and the non-zero
/// transitions by about n x L; the posterior decoder's work per base is linear in those).
Model compile(const Profile& profile);

}  // namespace tidemark
