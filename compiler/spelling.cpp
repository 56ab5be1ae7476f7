#include "spelling.hpp"

#include <algorithm>
#include <utility>

namespace meander {

std::size_t edit_distance(const std::string& a, const std::string& b) {
    std::vector<std::size_t> prev(b.size() + 1), cur(b.size() + 1);
    for (std::size_t j = 0; j <= b.size(); ++j) prev[j] = j;
    for (std::size_t i = 1; i <= a.size(); ++i) {
        cur[0] = i;
        for (std::size_t j = 1; j <= b.size(); ++j)
            cur[j] = std::min({prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + (a[i - 1] == b[j - 1] ? 0 : 1)});
        std::swap(prev, cur);
    }
    return prev[b.size()];
}

std::vector<std::string> close_names(const std::string& name, const std::vector<std::string>& known, std::size_t limit) {
    std::vector<std::pair<std::size_t, std::size_t>> close;  // (distance, index in known)
    for (std::size_t i = 0; i < known.size(); ++i) {
        const std::size_t d = edit_distance(name, known[i]);
        if (d <= limit) close.emplace_back(d, i);
    }
    std::stable_sort(close.begin(), close.end());
    std::vector<std::string> out;
    for (const auto& c : close) out.push_back(known[c.second]);
    return out;
}

}  // namespace meander
