#include "tensors.hpp"

#include <fmt/format.h>
#include <fmt/ranges.h>

#include <algorithm>
#include <cmath>

namespace meander {

namespace {

// Shortest round-trip text in the tensor's own precision (float for the
// float32, float16 and bfloat16 tensors, which float holds exactly).
std::string value_text(double v, const std::string& dtype) {
    if (dtype == "float32" || dtype == "float16" || dtype == "bfloat16") return format_float(static_cast<float>(v));
    return format_double(v);
}

}  // namespace

std::string render_tensor_table(const TensorSet& set, const std::vector<std::string>* binding) {
    std::vector<std::vector<std::string>> rows;
    rows.push_back({"name", "dtype", "shape", "min", "max"});
    if (binding) rows[0].push_back("bound to");
    std::size_t bound_count = 0, ignored_count = 0;
    for (std::size_t i = 0; i < set.tensors.size(); ++i) {
        const Tensor& t = set.tensors[i];
        std::string lo = "-", hi = "-";
        bool any_nan = false;
        if (!t.values.empty()) {
            double mn = INFINITY, mx = -INFINITY;
            for (double v : t.values) {
                if (std::isnan(v)) { any_nan = true; continue; }
                mn = std::min(mn, v);
                mx = std::max(mx, v);
            }
            if (mn <= mx) {
                lo = value_text(mn, t.dtype);
                hi = value_text(mx, t.dtype);
            }
            if (any_nan) hi += " (and nan)";
        }
        rows.push_back({t.name, t.dtype, fmt::format("[{}]", fmt::join(t.shape, ", ")), lo, hi});
        if (binding) {
            const std::string& b = (*binding)[i];
            rows.back().push_back(b.empty() ? "-" : b);
            if (b == "ignored") ++ignored_count;
            else if (!b.empty()) ++bound_count;
        }
    }
    std::vector<std::size_t> width(rows[0].size(), 0);
    for (const auto& r : rows)
        for (std::size_t c = 0; c < r.size(); ++c) width[c] = std::max(width[c], r[c].size());
    std::string out;
    for (const auto& r : rows) {
        std::string line;
        for (std::size_t c = 0; c < r.size(); ++c) line += fmt::format("{:<{}}  ", r[c], width[c]);
        while (!line.empty() && line.back() == ' ') line.pop_back();
        out += line + "\n";
    }
    out += fmt::format("{} tensor{} in {}", set.tensors.size(), set.tensors.size() == 1 ? "" : "s", set.path);
    if (binding) out += fmt::format("; {} bound by the description", bound_count);
    if (binding && ignored_count) out += fmt::format(", {} ignored", ignored_count);
    return out + "\n";
}

}  // namespace meander
