// CSV rows of numbers: the input files of eval, verify, cost, tune, refit and
// the self-test, and labels. Declared in source.hpp.
#include "source.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <cstdlib>
#include <limits>

#include "spelling.hpp"

namespace meander {

namespace {

bool is_blank(std::string_view s) {
    for (char c : s)
        if (c != ' ' && c != '\t' && c != '\r') return false;
    return true;
}

enum class NumberRead { ok, not_a_number, out_of_range };

std::string_view trimmed(std::string_view field) {
    std::size_t b = 0, e = field.size();
    while (b < e && (field[b] == ' ' || field[b] == '\t')) ++b;
    while (e > b && (field[e - 1] == ' ' || field[e - 1] == '\t' || field[e - 1] == '\r')) --e;
    return field.substr(b, e - b);
}

NumberRead read_number(std::string_view field, double& out) {
    const std::string_view t = trimmed(field);
    if (t.empty()) return NumberRead::not_a_number;
    std::string tmp(t);
    // strtod is locale-dependent for the decimal point; the "C" locale is the
    // default in our programs, which never call setlocale.
    char* end = nullptr;
    errno = 0;
    out = std::strtod(tmp.c_str(), &end);
    if (end != tmp.c_str() + tmp.size()) return NumberRead::not_a_number;
    // ERANGE also flags an underflow (a subnormal such as 5e-324, or a value that
    // rounds to zero): strtod then returns the correctly rounded value. Only an
    // overflow, which returns an infinity, is refused.
    if (errno == ERANGE && std::isinf(out)) return NumberRead::out_of_range;
    return NumberRead::ok;
}

struct Field {
    std::size_t start;          // byte offset in the line
    std::string_view text;
};

std::vector<Field> split(std::string_view line, char sep) {
    std::vector<Field> out;
    std::size_t pos = 0;
    while (true) {
        const std::size_t at = line.find(sep, pos);
        out.push_back({pos, line.substr(pos, at == std::string_view::npos ? std::string_view::npos : at - pos)});
        if (at == std::string_view::npos) return out;
        pos = at + 1;
    }
}

// The separator a line that does not split into `width` values at commas uses instead, if it is plain.
char other_separator(std::string_view line, int width) {
    const std::size_t commas = split(line, ',').size();
    for (char c : {';', '\t', '|'}) {
        const std::size_t n = split(line, c).size();
        if (n > 1 && (static_cast<int>(n) == width || commas == 1)) return c;
    }
    return 0;
}

std::string separator_problem(char sep, std::string_view line) {
    const char* name = sep == ';' ? "semicolons (';')" : sep == '\t' ? "tabs" : "vertical bars ('|')";
    return fmt::format("the values are separated by {}, not commas: meander reads comma-separated values{}", name,
                       line.find(',') != std::string_view::npos ? " with '.' as the decimal point" : "");
}

std::string shown(std::string_view text) {
    const std::string_view t = trimmed(text);
    return t.size() <= 24 ? std::string(t) : std::string(t.substr(0, 24)) + "...";
}

// "vib.3" or "vib[3]" for the vector "vib": the index, else -1.
long vector_index(std::string_view name, std::string_view vector) {
    if (vector.empty() || name.size() <= vector.size() + 1 || name.substr(0, vector.size()) != vector) return -1;
    std::string_view rest = name.substr(vector.size());
    if (rest.front() == '.') rest.remove_prefix(1);
    else if (rest.front() == '[' && rest.back() == ']') rest = rest.substr(1, rest.size() - 2);
    else return -1;
    if (rest.empty() || rest.size() > 9) return -1;
    long v = 0;
    for (char c : rest) {
        if (c < '0' || c > '9') return -1;
        v = v * 10 + (c - '0');
    }
    return v;
}

}  // namespace

void RowProblems::add(const std::string& key, Loc loc, std::string message) {
    for (auto& p : list_)
        if (p.key == key) {
            ++p.more;
            p.last_line = loc.line;
            return;
        }
    list_.push_back(Problem{key, loc, std::move(message), 0, loc.line});
}

void RowProblems::report(const Source& src, Diagnostics& diags) const {
    for (const auto& p : list_) {
        std::string message = p.message;
        if (p.more > 0)
            message += fmt::format(" (and {} more row{} like it, the last on line {})", p.more, p.more == 1 ? "" : "s",
                                   p.last_line);
        diags.error(src, p.loc, std::move(message));
    }
}

std::string csv_separator_problem(std::string_view line, std::size_t fields) {
    if (split(line, ',').size() == fields) return {};
    const char sep = other_separator(line, static_cast<int>(fields));
    return sep ? separator_problem(sep, line) : std::string();
}

void check_csv_header(const std::vector<std::string_view>& fields, const std::vector<std::size_t>& starts, std::size_t first,
                      int line, std::string_view vector_name, const VectorInfo* info, RowProblems& problems,
                      std::string_view role) {
    const std::vector<std::string> none;
    // A classifier's output is named by its classes (eval heads its columns with them).
    const std::vector<std::string>& declared = !info                  ? none
                                               : !info->names.empty() ? info->names
                                                                      : info->classes;
    const std::string vec(vector_name);
    if (!declared.empty() && first < fields.size()) {
        // A header of other names altogether says nothing of the order: one problem, not one per column.
        bool related = false;
        for (std::size_t i = first; i < fields.size() && !related; ++i) {
            std::string_view name = trimmed(fields[i]);
            const std::size_t open = name.rfind(" (");
            if (name.size() > 3 && name.back() == ')' && open != std::string_view::npos && open > 0)
                name = name.substr(0, open);
            related = vector_index(name, vector_name) >= 0 || (declared.size() == 1 && name == vector_name) ||
                      std::find(declared.begin(), declared.end(), name) != declared.end() ||
                      !close_names(std::string(name), declared, 2).empty();
        }
        if (!related) {
            std::string list;
            for (std::size_t i = 0; i < declared.size() && i < 8; ++i) list += (i ? ", " : "") + declared[i];
            if (declared.size() > 8) list += fmt::format(" and {} more", declared.size() - 8);
            problems.add("header foreign", Loc{line, static_cast<int>(starts[first] + 1)},
                         fmt::format("the header names none of {} '{}''s values: it takes {}, in this order (a line of "
                                     "other names can stand as a '#' comment)",
                                     role, vec, list));
            return;
        }
    }
    for (std::size_t i = first; i < fields.size(); ++i) {
        const std::string_view name = trimmed(fields[i]);
        const Loc at{line, static_cast<int>(starts[i] + 1)};
        const std::size_t column = i + 1, value = i - first;
        bool repeated = false;
        for (std::size_t j = first; j < i && !repeated; ++j)
            if (trimmed(fields[j]) == name) {
                problems.add(fmt::format("repeat {}", i), at,
                             fmt::format("column {} repeats the name '{}' of column {}", column, shown(name), j + 1));
                repeated = true;
            }
        if (repeated) continue;
        const long k = vector_index(name, vector_name);
        if (k >= 0) {
            if (static_cast<std::size_t>(k) != value)
                problems.add(fmt::format("order {}", i), at,
                             fmt::format("column {} is named '{}', but {} '{}' takes its values in order: column {} "
                                         "holds {}.{}",
                                         column, shown(name), role, vec, column, vec, value));
            continue;
        }
        if (declared.size() <= value) continue;  // no names given: a header of the user's own
        // "name (unit)", as eval writes its headers.
        std::string base(name), unit;
        const std::size_t open = name.rfind(" (");
        if (name.size() > 3 && name.back() == ')' && open != std::string_view::npos && open > 0) {
            base = std::string(name.substr(0, open));
            unit = std::string(name.substr(open + 2, name.size() - open - 3));
        }
        if (base == declared[value] || (declared.size() == 1 && base == vec)) {
            const std::string& want = value < info->units.size() ? info->units[value] : std::string();
            if (!unit.empty() && !want.empty() && unit != want)
                problems.add(fmt::format("unit {}", i), at,
                             fmt::format("column {} gives '{}' in '{}', but {} '{}' takes it in '{}'", column, base,
                                         shown(unit), role, vec, want));
            continue;
        }
        const auto elsewhere = std::find(declared.begin(), declared.end(), base);
        if (elsewhere != declared.end()) {
            problems.add(fmt::format("place {}", i), at,
                         fmt::format("column {} is named '{}', but {} '{}' takes '{}' there: '{}' is its column {}", column,
                                     shown(name), role, vec, declared[value], base,
                                     first + static_cast<std::size_t>(elsewhere - declared.begin()) + 1));
            continue;
        }
        std::string message = fmt::format("column {} is named '{}', but {} '{}' takes '{}' there", column, shown(name),
                                          role, vec, declared[value]);
        const std::vector<std::string> close = close_names(base, declared, 2);
        if (!close.empty() && close.front() == declared[value]) {
            message += fmt::format(": did you mean '{}'?", close.front());
        } else if (!close.empty()) {
            const std::size_t j = static_cast<std::size_t>(std::find(declared.begin(), declared.end(), close.front()) -
                                                           declared.begin());
            message += fmt::format(", and names no value '{}': did you mean '{}' (its column {})?", base, close.front(),
                                   first + j + 1);
        } else {
            message += fmt::format(", and names no value '{}'", shown(base));
        }
        problems.add(fmt::format("name {}", i), at, message);
    }
}

bool parse_number(std::string_view field, double& out) { return read_number(field, out) == NumberRead::ok; }

std::optional<std::vector<std::vector<double>>> read_csv_rows(const std::string& path, int width, Diagnostics& diags,
                                                              bool float32_range, std::vector<int>* lines,
                                                              std::string_view vector_name, const VectorInfo* info,
                                                              std::string_view role, bool* header_only) {
    auto text = read_file(path, diags);
    if (!text) return std::nullopt;
    Source src(path, *text);
    std::vector<std::vector<double>> rows;
    bool first_content = true;
    RowProblems problems;
    std::size_t header_problems = 0;  // of `problems`, the header's names' (check_csv_header)
    for (std::size_t li = 1; li <= src.line_starts.size(); ++li) {
        const std::string_view line = src.line_text(static_cast<int>(li));
        if (is_blank(line) || line.front() == '#') continue;
        const int ln = static_cast<int>(li);
        const std::vector<Field> fields = split(line, ',');
        std::vector<double> row(fields.size(), 0.0);
        std::vector<NumberRead> read(fields.size());
        bool any_number = false;
        for (std::size_t i = 0; i < fields.size(); ++i) {
            read[i] = read_number(fields[i].text, row[i]);
            any_number = any_number || read[i] != NumberRead::not_a_number;
        }
        const bool header = first_content && !any_number;  // a header holds names only (a row with a typo is no header)
        first_content = false;
        if (static_cast<int>(fields.size()) != width) {
            if (const char sep = other_separator(line, width)) {
                problems.add("separator", Loc{ln, 1}, separator_problem(sep, line));
                continue;
            }
            if (header)
                problems.add("header", Loc{ln, 1}, fmt::format("header names {} columns, expected {}", fields.size(), width));
            else
                problems.add(fmt::format("count {}", fields.size()), Loc{ln, 1},
                             fmt::format("row has {} value{}, expected {}", fields.size(), fields.size() == 1 ? "" : "s", width));
            continue;
        }
        if (header) {
            std::vector<std::string_view> names;
            std::vector<std::size_t> starts;
            for (const Field& f : fields) {
                names.push_back(f.text);
                starts.push_back(f.start);
            }
            const std::size_t before = problems.size();
            check_csv_header(names, starts, 0, ln, vector_name, info, problems, role);
            header_problems = problems.size() - before;
            continue;
        }
        bool fits = true;
        for (std::size_t i = 0; i < fields.size() && fits; ++i) {
            const Loc at{ln, static_cast<int>(fields[i].start + 1)};
            if (read[i] == NumberRead::not_a_number) {
                if (trimmed(fields[i].text).empty())
                    problems.add(fmt::format("empty {}", i), at, fmt::format("column {} is empty: expected a number", i + 1));
                else
                    problems.add(fmt::format("text {}", i), at,
                                 fmt::format("expected a number in column {}, not '{}'", i + 1, shown(fields[i].text)));
                fits = false;
            } else if (read[i] == NumberRead::out_of_range) {
                problems.add(fmt::format("range {}", i), at,
                             fmt::format("{} in column {} is beyond the range of a double", shown(fields[i].text), i + 1));
                fits = false;
            } else if (float32_range && std::fabs(row[i]) > static_cast<double>(std::numeric_limits<float>::max())) {
                problems.add(fmt::format("float32 {}", i), at,
                             fmt::format("{} is beyond the float32 range (largest {}): the emitted float32 code "
                                         "would see an infinite input",
                                         format_double(row[i]), format_float(std::numeric_limits<float>::max())));
                fits = false;
            }
        }
        if (!fits) continue;
        rows.push_back(std::move(row));
        if (lines) lines->push_back(ln);
    }
    if (!problems.empty()) {
        if (header_only) *header_only = problems.size() == header_problems;
        problems.report(src, diags);
        return std::nullopt;
    }
    if (rows.empty()) {
        diags.error(path, "no input rows");
        return std::nullopt;
    }
    return rows;
}

}  // namespace meander
