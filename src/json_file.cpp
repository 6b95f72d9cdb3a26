// Internal: reading the JSON files tidemark's steps hand to each other.
#include "json_file.hpp"

#include <fstream>
#include <sstream>

namespace tidemark {

std::string read_text_file(const std::string& path, const std::string& what) {
    std::ifstream in(path);
    if (!in) throw InputError(path + ": cannot open" + (what.empty() ? "" : " " + what));
    std::stringstream text;
    text << in.rdbuf();
    return text.str();
}

}  // namespace tidemark
