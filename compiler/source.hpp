// Source text, the one diagnostic sink, and the file I/O every stage shares.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

#include "../runtime/model.hpp"

namespace meander {

struct Source {
    std::string path;               // as given on the command line (used in diagnostics)
    std::string text;
    std::vector<std::size_t> line_starts;  // byte offset of each line's first character

    Source() = default;
    Source(std::string path, std::string text);
    std::string_view line_text(int line) const;   // without the newline; empty if out of range
    Loc loc_of(std::size_t offset) const;         // byte offset -> 1-based line/column
};

enum class Severity { error, warning, note };

struct Diagnostic {
    Severity severity = Severity::error;
    std::string file;               // may be empty (usage errors)
    Loc loc;                        // line 0: no position
    std::string message;
    std::string line_text;          // copy of the source line, when there is a position
};

// Collects diagnostics; renders each as
//   file:line:col: error: message
//   <the source line>
//   <spaces/tabs up to the column>^
// or "file: error: message" when there is no position (binary inputs).
class Diagnostics {
public:
    void report(Severity s, const Source* src, Loc loc, std::string message);
    void error(const Source& src, Loc loc, std::string message) { report(Severity::error, &src, loc, std::move(message)); }
    void warning(const Source& src, Loc loc, std::string message) { report(Severity::warning, &src, loc, std::move(message)); }
    void note(const Source& src, Loc loc, std::string message) { report(Severity::note, &src, loc, std::move(message)); }
    // Errors about a file without a position in it (a binary weights file, a missing file).
    void error(std::string file, std::string message);
    void warning(std::string file, std::string message);

    int error_count() const { return errors_; }
    bool ok() const { return errors_ == 0; }
    const std::vector<Diagnostic>& all() const { return items_; }
    std::string render() const;     // every diagnostic, in order, each ending with '\n'
    static std::string render(const Diagnostic& d);

private:
    std::vector<Diagnostic> items_;
    int errors_ = 0;
};

// Reads a whole file; reports "path: error: cannot read file: <reason>" on failure.
std::optional<std::string> read_file(const std::string& path, Diagnostics& diags);
std::optional<Source> load_source(const std::string& path, Diagnostics& diags);

// Writes `content` to a temporary file beside `path`, then renames it over
// `path`: either the whole new file is there or the old one is untouched.
// A symbolic link is written through (the link stays); the replaced file's
// permissions are kept.
bool write_file_atomic(const std::string& path, std::string_view content, Diagnostics& diags);
// Several files (path, content) as one: all are written to temporaries, then
// renamed; when any write fails, none of the files is touched.
bool write_files_atomic(const std::vector<std::pair<std::string, std::string>>& files, Diagnostics& diags);

// A folder to build emitted code in: `keep` (created if needed, left in place)
// or, when `keep` is empty, a fresh temporary folder named after `stem` that is
// removed with this object.
class WorkFolder {
public:
    static std::optional<WorkFolder> open(const std::string& keep, const std::string& stem, Diagnostics& diags);
    WorkFolder(WorkFolder&& other) noexcept : path_(std::move(other.path_)), keep_(other.keep_) { other.path_.clear(); }
    WorkFolder(const WorkFolder&) = delete;
    WorkFolder& operator=(const WorkFolder&) = delete;
    WorkFolder& operator=(WorkFolder&&) = delete;
    ~WorkFolder();
    const std::string& path() const { return path_; }

private:
    WorkFolder(std::string path, bool keep) : path_(std::move(path)), keep_(keep) {}
    std::string path_;
    bool keep_ = false;
};

// `s` as one word for /bin/sh.
std::string shell_quote(const std::string& s);
// Runs `command` through the shell; its standard output, or nullopt when it
// cannot start or exits non-zero.
std::optional<std::string> run_capture(const std::string& command);

// 64-bit FNV-1a, for the content hash in emitted banners.
std::uint64_t fnv1a64(std::string_view bytes, std::uint64_t seed = 0xcbf29ce484222325ULL);

// Rows of numbers from a CSV file (comma separated, optional header line of
// names, blank lines and '#' comment lines skipped). Every row must have
// `width` values; errors are reported as path:line:col.
// With `float32_range`, a value beyond the largest float (it would become
// infinite in emitted float32 code) is an error too.
// `lines`, when given, receives the 1-based file line of each row.
std::optional<std::vector<std::vector<double>>> read_csv_rows(const std::string& path, int width, Diagnostics& diags,
                                                              bool float32_range = false, std::vector<int>* lines = nullptr);

// Shortest text that reads back to the same double / float (fmt, locale-free).
std::string format_double(double v);
std::string format_float(float v);

}  // namespace meander
