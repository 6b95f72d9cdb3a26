// Shared helpers for the unit tests: contigs from strings, temporary files, profile JSON.
#pragma once

#include <unistd.h>

#include <fstream>
#include <random>
#include <string>

#include "base_table.hpp"
#include "tidemark/profile.hpp"
#include "tidemark/sequence.hpp"

namespace tidemark::test {

inline Contig contig_from(const std::string& bases, const std::string& name = "seq") {
    Contig c;
    c.name = name;
    for (char ch : bases) c.push(detail::byte_classes()[static_cast<unsigned char>(ch)]);
    return c;
}

/// A file in a fresh temporary folder, removed with the object.
class TempFile {
public:
    explicit TempFile(const std::string& content, const std::string& suffix = ".txt") {
        char dir[] = "/tmp/tidemark-test-XXXXXX";
        dir_ = mkdtemp(dir);
        path_ = dir_ + "/file" + suffix;
        std::ofstream(path_, std::ios::binary) << content;
    }
    ~TempFile() { std::system(("rm -rf '" + dir_ + "'").c_str()); }
    const std::string& path() const { return path_; }
    const std::string& dir() const { return dir_; }

private:
    std::string dir_, path_;
};

/// One order-0 state that emits only A and C: any G or T makes a sequence impossible.
inline Profile profile_without_g() {
    Profile p;
    p.name = "no-g";
    p.regions = {{"a", true, ""}};
    p.states = {{"x", 0, 0, {{0.5, 0.5, 0.0, 0.0}}}};
    p.initial = {1.0};
    p.transitions = {{1.0}};
    return p;
}

/// A random valid profile: S states in R regions (region 0 reported), the given orders.
inline Profile random_profile(std::mt19937_64& rng, int S, int R, const std::vector<int>& orders,
                              bool with_zeros = false) {
    std::uniform_real_distribution<double> u(0.05, 1.0);
    Profile p;
    p.name = "random";
    for (int r = 0; r < R; ++r) p.regions.push_back({"region" + std::to_string(r), r == 0, ""});
    const auto normalise = [](std::vector<double>& v) {
        double s = 0;
        for (double x : v) s += x;
        for (double& x : v) x /= s;
    };
    for (int s = 0; s < S; ++s) {
        StateSpec st;
        st.name = "s" + std::to_string(s);
        st.region = s % R;
        st.order = orders[s % orders.size()];
        for (size_t row = 0; row < (size_t{1} << (2 * st.order)); ++row) {
            std::vector<double> v(4);
            for (auto& x : v) x = u(rng);
            if (with_zeros && row % 3 == 1) v[row % 4] = 0;
            normalise(v);
            st.emissions.push_back({v[0], v[1], v[2], v[3]});
        }
        p.states.push_back(st);
    }
    p.initial.resize(S);
    for (auto& x : p.initial) x = u(rng);
    normalise(p.initial);
    for (int i = 0; i < S; ++i) {
        std::vector<double> row(S);
        for (auto& x : row) x = u(rng);
        if (with_zeros && S > 2) row[(i + 1) % S] = 0;
        normalise(row);
        p.transitions.push_back(row);
    }
    return p;
}

}  // namespace tidemark::test
