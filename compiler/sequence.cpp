#include "sequence.hpp"

#include <fmt/format.h>

#include <cmath>
#include <limits>
#include <map>

#include "../runtime/stream.hpp"
#include "format.hpp"

namespace meander {

namespace {

bool blank_line(std::string_view s) {
    for (char c : s)
        if (c != ' ' && c != '\t' && c != '\r') return false;
    return true;
}

std::string_view trimmed(std::string_view s) {
    while (!s.empty() && (s.front() == ' ' || s.front() == '\t')) s.remove_prefix(1);
    while (!s.empty() && (s.back() == ' ' || s.back() == '\t' || s.back() == '\r')) s.remove_suffix(1);
    return s;
}

}  // namespace

std::optional<std::vector<SequenceRow>> read_sequence_file(const std::string& path, int width, double largest_gap,
                                                           Diagnostics& diags, bool float32_range, std::string_view vector_name,
                                                           const VectorInfo* info) {
    auto text = read_file(path, diags);
    if (!text) return std::nullopt;
    Source src(path, *text);
    const int before = diags.error_count();
    const std::size_t columns = static_cast<std::size_t>(width) + 2;
    std::vector<SequenceRow> rows;
    std::map<std::string, int> began;   // sequence id -> line of its first row
    std::optional<SequenceRow> prev;    // the previous good row (without its values)
    RowProblems problems;               // one diagnostic per distinct problem, with a count of the rows like it
    bool first_content = true;
    const double flt_max = static_cast<double>(std::numeric_limits<float>::max());
    for (std::size_t li = 1; li <= src.line_starts.size(); ++li) {
        const int line = static_cast<int>(li);
        std::string_view text_line = src.line_text(line);
        if (blank_line(text_line) || text_line.front() == '#') continue;
        std::vector<std::string_view> fields;
        std::vector<std::size_t> starts;
        for (std::size_t pos = 0;;) {
            const std::size_t comma = text_line.find(',', pos);
            fields.push_back(text_line.substr(pos, comma == std::string_view::npos ? std::string_view::npos : comma - pos));
            starts.push_back(pos);
            if (comma == std::string_view::npos) break;
            pos = comma + 1;
        }
        auto at = [&](std::size_t i) { return Loc{line, static_cast<int>(starts[i] + 1)}; };
        double t = 0;
        const bool time_is_number = fields.size() > 1 && parse_number(fields[1], t);
        if (fields.size() != columns) {
            const std::string sep = csv_separator_problem(text_line, columns);
            if (!sep.empty()) {
                first_content = false;
                problems.add("separator", Loc{line, 1}, sep);
                continue;
            }
        }
        if (first_content && !time_is_number) {  // a header line of names
            first_content = false;
            if (fields.size() != columns)
                diags.error(src, Loc{line, 1}, fmt::format("header names {} columns, expected {}: a sequence id, a time stamp "
                                                           "and {} observation values",
                                                           fields.size(), columns, width));
            else
                check_csv_header(fields, starts, 2, line, vector_name, info, problems);
            continue;
        }
        first_content = false;
        if (fields.size() != columns) {
            problems.add(fmt::format("count {}", fields.size()), Loc{line, 1},
                         fmt::format("row has {} columns, expected {}: a sequence id, a time stamp and {} observation values",
                                     fields.size(), columns, width));
            continue;
        }
        SequenceRow row;
        row.line = line;
        row.id = std::string(trimmed(fields[0]));
        if (row.id.empty()) {
            problems.add("id", at(0), "expected a sequence id");
            continue;
        }
        if (!time_is_number) {
            problems.add("time", at(1), "expected a time stamp (a number)");
            continue;
        }
        if (!std::isfinite(t)) {
            problems.add("time finite", at(1), fmt::format("time stamp {} is not finite", trimmed(fields[1])));
            continue;
        }
        row.time = t;
        bool bad = false;
        for (std::size_t i = 2; i < columns && !bad; ++i) {
            double v = 0;
            if (!parse_number(fields[i], v)) {
                problems.add(fmt::format("text {}", i), at(i),
                             fmt::format("expected a number in column {}, not '{}'", i + 1, trimmed(fields[i])));
                bad = true;
            } else if (float32_range && std::fabs(v) > flt_max) {
                problems.add(fmt::format("float32 {}", i), at(i), fmt::format("{} is beyond the float32 range (largest {}): the emitted float32 code "
                                                    "would see an infinite input",
                                                    format_double(v), format_float(std::numeric_limits<float>::max())));
                bad = true;
            }
            row.values.push_back(v);
        }
        if (bad) continue;
        if (!prev || prev->id != row.id) {
            auto [it, fresh] = began.emplace(row.id, line);
            if (!fresh) {
                problems.add("returns", at(0), fmt::format("sequence '{}' returns after another began (its rows start on line {}); the "
                                                    "rows of a sequence must be together",
                                                    row.id, it->second));
                continue;
            }
            row.first = true;
        } else {
            const double gap = row.time - prev->time;
            const std::string step = fmt::format("time stamp {} after {} (line {})", format_number(row.time),
                                                 format_number(prev->time), prev->line);
            if (gap < 0) {
                problems.add("backwards", at(1), fmt::format("time goes backwards within sequence '{}': {}", row.id, step));
                continue;
            }
            if (gap == 0) {
                problems.add("repeat", at(1), fmt::format("time stamp {} repeats the previous row's (line {}); time stamps must "
                                                    "increase within a sequence",
                                                    format_number(row.time), prev->line));
                continue;
            }
            if (!(gap <= largest_gap)) {
                problems.add("gap", at(1), fmt::format("gap {} since the previous row ({}) is larger than the model's largest gap {}",
                                                    format_number(gap), step, format_number(largest_gap)));
                continue;
            }
            row.gap = gap;
        }
        prev = SequenceRow{row.id, row.time, row.gap, row.first, {}, row.line};
        rows.push_back(std::move(row));
    }
    problems.report(src, diags);
    if (diags.error_count() != before) return std::nullopt;
    if (rows.empty()) {
        diags.error(path, "no observation rows");
        return std::nullopt;
    }
    return rows;
}

std::vector<EvalResult> evaluate_sequences(const Model& model, const std::vector<SequenceRow>& rows) {
    std::vector<EvalResult> results;
    Eigen::VectorXd state;
    for (const SequenceRow& row : rows) {
        if (row.first) state = Eigen::VectorXd::Zero(model.stream->state_size);
        const Eigen::Map<const Eigen::VectorXd> x(row.values.data(), static_cast<Eigen::Index>(row.values.size()));
        results.push_back(observe(model, state, x, row.gap));
    }
    return results;
}

}  // namespace meander
