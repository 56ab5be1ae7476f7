// CSV rows of numbers: the input files of eval, verify, cost, tune, refit and
// the self-test, and labels. Declared in source.hpp.
#include "source.hpp"

#include <fmt/format.h>

#include <cerrno>
#include <cmath>
#include <cstdlib>
#include <limits>

namespace meander {

namespace {

bool is_blank(std::string_view s) {
    for (char c : s)
        if (c != ' ' && c != '\t' && c != '\r') return false;
    return true;
}

}  // namespace

bool parse_number(std::string_view field, double& out) {
    std::size_t b = 0, e = field.size();
    while (b < e && (field[b] == ' ' || field[b] == '\t')) ++b;
    while (e > b && (field[e - 1] == ' ' || field[e - 1] == '\t' || field[e - 1] == '\r')) --e;
    if (b == e) return false;
    std::string tmp(field.substr(b, e - b));
    // strtod is locale-dependent for the decimal point; the "C" locale is the
    // default in our programs, which never call setlocale.
    char* end = nullptr;
    errno = 0;
    out = std::strtod(tmp.c_str(), &end);
    return end == tmp.c_str() + tmp.size() && errno != ERANGE;
}

std::optional<std::vector<std::vector<double>>> read_csv_rows(const std::string& path, int width, Diagnostics& diags,
                                                              bool float32_range, std::vector<int>* lines) {
    auto text = read_file(path, diags);
    if (!text) return std::nullopt;
    Source src(path, *text);
    std::vector<std::vector<double>> rows;
    bool first_content = true;
    int errors_before = diags.error_count();
    for (std::size_t li = 1; li <= src.line_starts.size(); ++li) {
        std::string_view line = src.line_text(static_cast<int>(li));
        if (is_blank(line) || line.front() == '#') continue;
        std::vector<double> row;
        std::vector<std::size_t> starts;
        bool bad = false;
        std::size_t bad_col = 0;
        std::size_t pos = 0;
        while (true) {
            std::size_t comma = line.find(',', pos);
            std::string_view field = line.substr(pos, comma == std::string_view::npos ? std::string_view::npos : comma - pos);
            double v = 0;
            if (!parse_number(field, v)) {
                if (!bad) bad_col = pos;
                bad = true;
            }
            row.push_back(v);
            starts.push_back(pos);
            if (comma == std::string_view::npos) break;
            pos = comma + 1;
        }
        bool any_number = false;
        for (std::size_t i = 0; i < row.size() && !any_number; ++i) {
            std::size_t end = i + 1 < starts.size() ? starts[i + 1] - 1 : line.size();
            double ignored = 0;
            any_number = parse_number(line.substr(starts[i], end - starts[i]), ignored);
        }
        if (bad && first_content && !any_number) {  // a header line of names (a row with a typo is no header)
            first_content = false;
            if (static_cast<int>(row.size()) != width)
                diags.error(src, Loc{static_cast<int>(li), 1},
                            fmt::format("header names {} columns, expected {}", row.size(), width));
            continue;
        }
        first_content = false;
        if (bad) {
            diags.error(src, Loc{static_cast<int>(li), static_cast<int>(bad_col + 1)}, "expected a number");
            continue;
        }
        if (static_cast<int>(row.size()) != width) {
            diags.error(src, Loc{static_cast<int>(li), 1},
                        fmt::format("row has {} value{}, expected {}", row.size(), row.size() == 1 ? "" : "s", width));
            continue;
        }
        if (float32_range) {
            bool fits = true;
            for (std::size_t i = 0; i < row.size() && fits; ++i)
                if (std::fabs(row[i]) > static_cast<double>(std::numeric_limits<float>::max())) {
                    diags.error(src, Loc{static_cast<int>(li), static_cast<int>(starts[i] + 1)},
                                fmt::format("{} is beyond the float32 range (largest {}): the emitted float32 code "
                                            "would see an infinite input",
                                            format_double(row[i]), format_float(std::numeric_limits<float>::max())));
                    fits = false;
                }
            if (!fits) continue;
        }
        rows.push_back(std::move(row));
        if (lines) lines->push_back(static_cast<int>(li));
    }
    if (diags.error_count() != errors_before) return std::nullopt;
    if (rows.empty()) {
        diags.error(path, "no input rows");
        return std::nullopt;
    }
    return rows;
}

}  // namespace meander
