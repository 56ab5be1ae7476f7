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
    std::string line_text;          // the source line (clipped around the caret), when there is a position
    int text_col = 0;               // the caret's 1-based column in line_text (0: loc.col)
};

// Limits that keep diagnostics small however hostile the input: at most
// kMaxDiagnosticsShown diagnostics are kept and printed (the rest are counted:
// "N more errors not shown"), and a source line longer than kLineShown bytes
// is shown kLineContext bytes either side of the caret, "..." marking a cut.
inline constexpr int kMaxDiagnosticsShown = 50;
inline constexpr std::size_t kLineShown = 200;
inline constexpr std::size_t kLineContext = 80;

// `s` with control characters (and DEL) written as escapes (\n, \t, \x1b),
// so a name read from a file cannot forge a diagnostic line or drive the
// terminal; every diagnostic's file and message go through it.
std::string escape_controls(std::string_view s);
// `s` between double quotes as the description language writes a string:
// \" \\ and \n escaped (grammar/LANGUAGE.md, "Strings").
std::string quote_string(std::string_view s);

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
    int not_shown() const { return not_shown_; }   // diagnostics past kMaxDiagnosticsShown
    bool ok() const { return errors_ == 0; }
    const std::vector<Diagnostic>& all() const { return items_; }
    std::string render() const;     // every kept diagnostic, in order, each ending with '\n', and the count of the rest
    static std::string render(const Diagnostic& d);

private:
    void keep(Diagnostic d);
    std::vector<Diagnostic> items_;
    int errors_ = 0;
    int not_shown_ = 0;
    int errors_not_shown_ = 0;
};

// Reads a whole file; reports "path: error: cannot read file: <reason>" on failure.
std::optional<std::string> read_file(const std::string& path, Diagnostics& diags);
// `text` with every line ending written as LF: CRLF (Windows) and a lone CR (old
// Mac OS) become LF, so one description checked out on two systems is the same text.
std::string normalise_line_endings(std::string_view text);
// A description read for parsing: line endings normalised (so the content hash,
// the emitted files and diagnostics do not depend on them) and a UTF-8
// byte-order mark blanked.
std::optional<Source> load_source(const std::string& path, Diagnostics& diags);

// Writes `content` to a new temporary file beside `path` (a unique name made
// with O_CREAT|O_EXCL, so no planted file or link is followed), flushes it to
// the disk, then renames it over `path`: either the whole new file is there or
// the old one is untouched. A symbolic link at `path` is written through (the
// link stays); the replaced file's permissions are kept.
bool write_file_atomic(const std::string& path, std::string_view content, Diagnostics& diags);
// Several files (path, content) as one: all are written to temporaries; then,
// holding flock(2) on each folder (so concurrent writers take turns), they are
// renamed, and when a rename fails the files already replaced are put back
// from hard links kept for the purpose. The folder holds the old set or the
// new set; only a crash between two renames leaves a mixed set (see
// DEVELOPERS.md, "Output files").
bool write_files_atomic(const std::vector<std::pair<std::string, std::string>>& files, Diagnostics& diags);
// Tests only: the rename used by write_files_atomic (nullptr: rename(2)).
void set_rename_for_tests(int (*rename_fn)(const char*, const char*));

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

// Rows of numbers from a CSV file (comma separated, '.' the decimal point,
// optional header line of names, blank lines and '#' comment lines skipped).
// Every row must have `width` values. Problems are reported as path:line:col,
// one diagnostic per distinct problem (its first row, and a count of the rows
// like it): a wrong column count, a value that is not a number (by column), a
// number beyond the range of a double, values separated by semicolons, tabs or
// vertical bars (named as such). Subnormal numbers read as themselves.
// With `float32_range`, a value beyond the largest float (it would become
// infinite in emitted float32 code) is an error too.
// `lines`, when given, receives the 1-based file line of each row.
// `vector_name` and `info`, when given (the description's input name, say "vib",
// and what it says of the values; `role` "output" for the output's), check a header
// line: see check_csv_header. `header_only`, when given, is set on a refusal
// for the header's names alone (the rows were fine).
std::optional<std::vector<std::vector<double>>> read_csv_rows(const std::string& path, int width, Diagnostics& diags,
                                                              bool float32_range = false, std::vector<int>* lines = nullptr,
                                                              std::string_view vector_name = {},
                                                              const VectorInfo* info = nullptr,
                                                              std::string_view role = "input", bool* header_only = nullptr);

// One CSV field as a number (blanks around allowed; strtod spelling, so "nan",
// "-nan", "inf" and "-inf", everything eval writes, read too; a subnormal or
// underflowing value reads as its nearest double).
bool parse_number(std::string_view field, double& out);

// For a CSV line that does not split at commas into `fields` values: the message that
// names the separator it uses instead (semicolons, tabs, vertical bars), or empty.
std::string csv_separator_problem(std::string_view line, std::size_t fields);

// Diagnostics about many rows of a file, one per distinct problem: the first row
// that shows it, with the count of the others ("and 39 more rows like it, the
// last on line 44"). `key` tells problems apart; rows are added in file order.
class RowProblems {
public:
    void add(const std::string& key, Loc loc, std::string message);
    void report(const Source& src, Diagnostics& diags) const;
    bool empty() const { return list_.empty(); }
    std::size_t size() const { return list_.size(); }  // distinct problems

private:
    struct Problem {
        std::string key;
        Loc loc;
        std::string message;
        int more = 0;
        int last_line = 0;
    };
    std::vector<Problem> list_;
};

// A CSV header line's value columns (fields[first..], `starts` their byte offsets in
// the line) against the vector they fill: no name may repeat; a column named as
// the vector's value k ("vib.3", "vib[3]") must stand at k; with `info->names`, each
// column must carry the declared name at its position, alone or as eval writes it
// ("name (unit)", the unit then the declared one when both are given; a vector of
// one value may also be named after the vector; a classifier's output without names is
// named by its classes): a name of another position is named with its column, an
// unknown one with the close declared names. Columns are counted in the file from 1.
// One problem per column, added to `problems`. `role` ("input", "output") names the
// vector in the messages.
void check_csv_header(const std::vector<std::string_view>& fields, const std::vector<std::size_t>& starts, std::size_t first,
                      int line, std::string_view vector_name, const VectorInfo* info, RowProblems& problems,
                      std::string_view role = "input");

// Shortest text that reads back to the same double / float (fmt, locale-free).
std::string format_double(double v);
std::string format_float(float v);

}  // namespace meander
