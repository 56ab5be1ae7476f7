#include "source.hpp"

#include <fmt/format.h>

#include <cerrno>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <limits>
#include <sstream>
#include <system_error>

namespace meander {

Source::Source(std::string p, std::string t) : path(std::move(p)), text(std::move(t)) {
    line_starts.push_back(0);
    for (std::size_t i = 0; i < text.size(); ++i)
        if (text[i] == '\n') line_starts.push_back(i + 1);
}

std::string_view Source::line_text(int line) const {
    if (line < 1 || static_cast<std::size_t>(line) > line_starts.size()) return {};
    std::size_t begin = line_starts[static_cast<std::size_t>(line - 1)];
    std::size_t end = text.find('\n', begin);
    if (end == std::string::npos) end = text.size();
    if (end > begin && text[end - 1] == '\r') --end;
    return std::string_view(text).substr(begin, end - begin);
}

Loc Source::loc_of(std::size_t offset) const {
    // Last line start <= offset.
    std::size_t lo = 0, hi = line_starts.size();
    while (hi - lo > 1) {
        std::size_t mid = (lo + hi) / 2;
        if (line_starts[mid] <= offset) lo = mid; else hi = mid;
    }
    return Loc{static_cast<int>(lo + 1), static_cast<int>(offset - line_starts[lo] + 1)};
}

void Diagnostics::report(Severity s, const Source* src, Loc loc, std::string message) {
    Diagnostic d;
    d.severity = s;
    if (src) {
        d.file = src->path;
        d.loc = loc;
        if (loc.line > 0) d.line_text = std::string(src->line_text(loc.line));
    }
    d.message = std::move(message);
    if (s == Severity::error) ++errors_;
    items_.push_back(std::move(d));
}

void Diagnostics::error(std::string file, std::string message) {
    Diagnostic d;
    d.file = std::move(file);
    d.message = std::move(message);
    ++errors_;
    items_.push_back(std::move(d));
}

void Diagnostics::warning(std::string file, std::string message) {
    Diagnostic d;
    d.severity = Severity::warning;
    d.file = std::move(file);
    d.message = std::move(message);
    items_.push_back(std::move(d));
}

std::string Diagnostics::render(const Diagnostic& d) {
    const char* sev = d.severity == Severity::error ? "error" : d.severity == Severity::warning ? "warning" : "note";
    std::string out;
    if (!d.file.empty()) {
        out += d.file;
        if (d.loc.line > 0) out += fmt::format(":{}:{}", d.loc.line, d.loc.col);
        out += ": ";
    }
    out += fmt::format("{}: {}\n", sev, d.message);
    if (d.loc.line > 0) {
        // Control characters (a NUL, say) would cut or garble the terminal
        // line; one '?' each keeps the caret in its column.
        for (char c : d.line_text) out += (static_cast<unsigned char>(c) < 0x20 && c != '\t') || c == 0x7f ? '?' : c;
        out += '\n';
        // Keep tabs so the caret lines up in any tab width.
        std::string pad;
        for (int i = 0; i + 1 < d.loc.col; ++i) {
            char c = static_cast<std::size_t>(i) < d.line_text.size() ? d.line_text[static_cast<std::size_t>(i)] : ' ';
            pad += c == '\t' ? '\t' : ' ';
        }
        out += pad;
        out += "^\n";
    }
    return out;
}

std::string Diagnostics::render() const {
    std::string out;
    for (const auto& d : items_) out += render(d);
    return out;
}

std::optional<std::string> read_file(const std::string& path, Diagnostics& diags) {
    std::error_code ec;
    if (std::filesystem::is_directory(path, ec)) {
        diags.error(path, "cannot read file: it is a directory");
        return std::nullopt;
    }
    std::ifstream in(path, std::ios::binary);
    if (!in) {
        diags.error(path, fmt::format("cannot read file: {}", std::strerror(errno)));
        return std::nullopt;
    }
    std::ostringstream ss;
    ss << in.rdbuf();
    if (in.bad()) {
        diags.error(path, "cannot read file: read failed");
        return std::nullopt;
    }
    return ss.str();
}

std::optional<Source> load_source(const std::string& path, Diagnostics& diags) {
    auto text = read_file(path, diags);
    if (!text) return std::nullopt;
    // Some editors start UTF-8 files with a byte-order mark; blanking it keeps
    // every byte offset, so columns stay right.
    if (text->compare(0, 3, "\xEF\xBB\xBF") == 0) text->replace(0, 3, "   ");
    return Source(path, std::move(*text));
}

namespace {

// Where a write to `path` must land: the target of a symbolic link, so that
// rewriting a linked file leaves the link in place.
std::filesystem::path write_target(const std::string& path) {
    namespace fs = std::filesystem;
    std::error_code ec;
    fs::path target(path);
    if (fs::is_symlink(fs::symlink_status(target, ec))) {
        fs::path resolved = fs::canonical(target, ec);
        if (!ec) return resolved;
    }
    return target;
}

// Writes `content` to a temporary file beside `target`, with the permissions
// of the file it will replace; returns the temporary's path, or empty.
std::filesystem::path write_temporary(const std::filesystem::path& target, std::string_view content,
                                      const std::string& shown, Diagnostics& diags) {
    namespace fs = std::filesystem;
    fs::path tmp = target;
    tmp += ".meander-tmp";
    {
        std::ofstream out(tmp, std::ios::binary | std::ios::trunc);
        if (!out) {
            diags.error(shown, fmt::format("cannot write file: {}", std::strerror(errno)));
            return {};
        }
        out.write(content.data(), static_cast<std::streamsize>(content.size()));
        out.flush();
        if (!out) {
            const int err = errno;
            out.close();
            std::error_code ec;
            fs::remove(tmp, ec);
            diags.error(shown, fmt::format("cannot write file: {}", err ? std::strerror(err) : "write failed"));
            return {};
        }
    }
    std::error_code ec;
    const fs::file_status old = fs::status(target, ec);
    if (!ec && fs::exists(old)) fs::permissions(tmp, old.permissions(), fs::perm_options::replace, ec);
    return tmp;
}

}  // namespace

bool write_file_atomic(const std::string& path, std::string_view content, Diagnostics& diags) {
    return write_files_atomic({{path, std::string(content)}}, diags);
}

bool write_files_atomic(const std::vector<std::pair<std::string, std::string>>& files, Diagnostics& diags) {
    namespace fs = std::filesystem;
    // Every file goes to a temporary first; only when all are written are they
    // renamed, so a failure leaves every existing file as it was.
    std::vector<std::pair<fs::path, fs::path>> done;  // temporary, target
    auto discard = [&done]() {
        std::error_code ec;
        for (const auto& d : done) fs::remove(d.first, ec);
    };
    for (const auto& [path, content] : files) {
        const fs::path target = write_target(path);
        std::error_code ec;
        if (fs::is_directory(target, ec)) {
            diags.error(path, "cannot write file: it is a directory");
            discard();
            return false;
        }
        fs::path tmp = write_temporary(target, content, path, diags);
        if (tmp.empty()) {
            discard();
            return false;
        }
        done.emplace_back(tmp, target);
    }
    for (std::size_t i = 0; i < done.size(); ++i) {
        std::error_code ec;
        fs::rename(done[i].first, done[i].second, ec);
        if (ec) {
            diags.error(files[i].first, fmt::format("cannot write file: {}", ec.message()));
            std::error_code ignore;
            for (std::size_t j = i; j < done.size(); ++j) fs::remove(done[j].first, ignore);
            return false;
        }
    }
    return true;
}

std::optional<WorkFolder> WorkFolder::open(const std::string& keep, const std::string& stem, Diagnostics& diags) {
    namespace fs = std::filesystem;
    std::error_code ec;
    if (!keep.empty()) {
        fs::create_directories(keep, ec);
        if (ec) {
            diags.error(keep, fmt::format("cannot create folder: {}", ec.message()));
            return std::nullopt;
        }
        return WorkFolder(keep, true);
    }
    std::string tmpl = (fs::temp_directory_path(ec) / (stem + "-XXXXXX")).string();
    if (mkdtemp(tmpl.data()) == nullptr) {
        diags.error(tmpl, "cannot create a temporary folder");
        return std::nullopt;
    }
    return WorkFolder(tmpl, false);
}

WorkFolder::~WorkFolder() {
    std::error_code ec;
    if (!keep_ && !path_.empty()) std::filesystem::remove_all(path_, ec);
}

std::string shell_quote(const std::string& s) {
    std::string q = "'";
    for (char c : s) {
        if (c == '\'') q += "'\\''"; else q += c;
    }
    return q + "'";
}

std::optional<std::string> run_capture(const std::string& command) {
    FILE* pipe = popen(command.c_str(), "r");
    if (pipe == nullptr) return std::nullopt;
    std::string out;
    char buf[4096];
    std::size_t n;
    while ((n = std::fread(buf, 1, sizeof buf, pipe)) > 0) out.append(buf, n);
    if (pclose(pipe) != 0) return std::nullopt;
    return out;
}

std::uint64_t fnv1a64(std::string_view bytes, std::uint64_t seed) {
    std::uint64_t h = seed;
    for (unsigned char c : bytes) {
        h ^= c;
        h *= 0x100000001b3ULL;
    }
    return h;
}

namespace {

bool is_blank(std::string_view s) {
    for (char c : s)
        if (c != ' ' && c != '\t' && c != '\r') return false;
    return true;
}

// Parses one number spanning exactly [b, e) (spaces around allowed).
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

}  // namespace

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

std::string format_double(double v) { return fmt::format("{}", v); }
std::string format_float(float v) { return fmt::format("{}", v); }

}  // namespace meander
