#include "source.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <fcntl.h>
#include <sys/file.h>
#include <sys/stat.h>
#include <unistd.h>

#include <cerrno>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <limits>
#include <memory>
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

std::string escape_controls(std::string_view s) {
    std::string out;
    out.reserve(s.size());
    for (char c : s) {
        const auto u = static_cast<unsigned char>(c);
        if (c == '\n') out += "\\n";
        else if (c == '\t') out += "\\t";
        else if (c == '\r') out += "\\r";
        else if (u < 0x20 || u == 0x7f) out += fmt::format("\\x{:02x}", u);
        else out += c;
    }
    return out;
}

std::string quote_string(std::string_view s) {
    std::string out = "\"";
    for (char c : s) {
        if (c == '"' || c == '\\') out += '\\';
        if (c == '\n') out += "\\n";
        else out += c;
    }
    return out + "\"";
}

void Diagnostics::keep(Diagnostic d) {
    if (d.severity == Severity::error) ++errors_;
    if (static_cast<int>(items_.size()) >= kMaxDiagnosticsShown) {
        ++not_shown_;
        if (d.severity == Severity::error) ++errors_not_shown_;
        return;
    }
    items_.push_back(std::move(d));
}

void Diagnostics::report(Severity s, const Source* src, Loc loc, std::string message) {
    Diagnostic d;
    d.severity = s;
    if (src) {
        d.file = src->path;
        d.loc = loc;
        if (loc.line > 0 && static_cast<int>(items_.size()) < kMaxDiagnosticsShown) {
            // Only a window around the caret is kept: a description on one
            // long line must not cost a copy of that line per diagnostic.
            const std::string_view line = src->line_text(loc.line);
            const std::size_t caret = loc.col > 0 ? static_cast<std::size_t>(loc.col - 1) : 0;
            std::size_t begin = caret > kLineContext ? caret - kLineContext : 0;
            std::size_t end = std::min(line.size(), caret + kLineContext);
            if (begin > line.size()) begin = line.size();
            // Do not cut a UTF-8 sequence in two.
            while (begin > 0 && begin < line.size() && (static_cast<unsigned char>(line[begin]) & 0xc0) == 0x80) --begin;
            while (end < line.size() && (static_cast<unsigned char>(line[end]) & 0xc0) == 0x80) ++end;
            if (line.size() <= kLineShown || (begin == 0 && end == line.size())) {
                d.line_text = std::string(line);
            } else {
                d.line_text = (begin > 0 ? "..." : "") + std::string(line.substr(begin, end - begin)) +
                              (end < line.size() ? "..." : "");
                d.text_col = static_cast<int>(caret - begin) + 1 + (begin > 0 ? 3 : 0);
            }
        }
    }
    d.message = std::move(message);
    keep(std::move(d));
}

void Diagnostics::error(std::string file, std::string message) {
    Diagnostic d;
    d.file = std::move(file);
    d.message = std::move(message);
    keep(std::move(d));
}

void Diagnostics::warning(std::string file, std::string message) {
    Diagnostic d;
    d.severity = Severity::warning;
    d.file = std::move(file);
    d.message = std::move(message);
    keep(std::move(d));
}

std::string Diagnostics::render(const Diagnostic& d) {
    const char* sev = d.severity == Severity::error ? "error" : d.severity == Severity::warning ? "warning" : "note";
    std::string out;
    if (!d.file.empty()) {
        out += escape_controls(d.file);
        if (d.loc.line > 0) out += fmt::format(":{}:{}", d.loc.line, d.loc.col);
        out += ": ";
    }
    out += fmt::format("{}: {}\n", sev, escape_controls(d.message));
    if (d.loc.line > 0) {
        // Control characters (a NUL, say) would cut or garble the terminal
        // line; one '?' each keeps the caret in its column.
        for (char c : d.line_text) out += (static_cast<unsigned char>(c) < 0x20 && c != '\t') || c == 0x7f ? '?' : c;
        out += '\n';
        // Keep tabs so the caret lines up in any tab width.
        std::string pad;
        const int col = d.text_col > 0 ? d.text_col : d.loc.col;
        for (int i = 0; i + 1 < col; ++i) {
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
    if (not_shown_ > 0) {
        const int others = not_shown_ - errors_not_shown_;
        out += fmt::format("note: {} more error{} not shown", errors_not_shown_, errors_not_shown_ == 1 ? "" : "s");
        if (others > 0) out += fmt::format(" (and {} warning{} or note{})", others, others == 1 ? "" : "s", others == 1 ? "" : "s");
        out += fmt::format("; the first {} are above\n", kMaxDiagnosticsShown);
    }
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

std::string normalise_line_endings(std::string_view text) {
    std::string out;
    out.reserve(text.size());
    for (std::size_t i = 0; i < text.size(); ++i) {
        if (text[i] != '\r') {
            out += text[i];
            continue;
        }
        out += '\n';
        if (i + 1 < text.size() && text[i + 1] == '\n') ++i;
    }
    return out;
}

std::optional<Source> load_source(const std::string& path, Diagnostics& diags) {
    auto text = read_file(path, diags);
    if (!text) return std::nullopt;
    // A CR only ever ends a line here: CRLF and lone CR read as LF. Columns stay
    // right (the CR stood at the end of its line) and so do line numbers.
    if (text->find('\r') != std::string::npos) *text = normalise_line_endings(*text);
    // Some editors start UTF-8 files with a byte-order mark; blanking it keeps
    // every byte offset, so columns stay right.
    if (text->compare(0, 3, "\xEF\xBB\xBF") == 0) text->replace(0, 3, "   ");
    return Source(path, std::move(*text));
}

namespace {

namespace fs = std::filesystem;

// Where a write to `path` must land: the target of a symbolic link, so that
// rewriting a linked file leaves the link in place.
fs::path write_target(const std::string& path) {
    std::error_code ec;
    fs::path target(path);
    if (fs::is_symlink(fs::symlink_status(target, ec))) {
        fs::path resolved = fs::canonical(target, ec);
        if (!ec) return resolved;
    }
    return target;
}

int (*g_rename)(const char*, const char*) = &::rename;

// A fresh name beside `target`, created by mkstemp (O_CREAT|O_EXCL: a planted
// file or symbolic link of that name is never opened, only skipped); the open
// descriptor, or -1 with errno set.
int create_unique(const fs::path& target, std::string& name) {
    name = target.string() + ".meander-XXXXXX";
    return mkstemp(name.data());
}

// The permissions a new file gets from open(2)'s usual 0666 and the umask.
mode_t new_file_mode() {
    const mode_t mask = umask(0);
    umask(mask);
    return static_cast<mode_t>(0666 & ~mask);
}

// Writes `content` to a new, uniquely named temporary beside `target`, with
// the permissions of the file it will replace, and flushes it to the disk;
// returns the temporary's path, or empty.
fs::path write_temporary(const fs::path& target, std::string_view content, const std::string& shown,
                         Diagnostics& diags) {
    std::string tmp;
    const int fd = create_unique(target, tmp);
    if (fd < 0) {
        diags.error(shown, fmt::format("cannot write file: {}", std::strerror(errno)));
        return {};
    }
    auto fail = [&](int err) {
        ::close(fd);
        ::unlink(tmp.c_str());
        diags.error(shown, fmt::format("cannot write file: {}", std::strerror(err)));
        return fs::path();
    };
    struct stat old {};
    const mode_t mode = ::stat(target.c_str(), &old) == 0 ? (old.st_mode & 07777) : new_file_mode();
    if (::fchmod(fd, mode) != 0) return fail(errno);
    std::size_t done = 0;
    while (done < content.size()) {
        const ssize_t n = ::write(fd, content.data() + done, content.size() - done);
        if (n < 0 && errno == EINTR) continue;
        if (n <= 0) return fail(n < 0 ? errno : EIO);
        done += static_cast<std::size_t>(n);
    }
    // Durability: the data must be on the disk before the rename makes it the file.
    if (::fsync(fd) != 0) return fail(errno);
    if (::close(fd) != 0) {
        const int err = errno;
        ::unlink(tmp.c_str());
        diags.error(shown, fmt::format("cannot write file: {}", std::strerror(err)));
        return {};
    }
    return fs::path(tmp);
}

// Holds flock(2) on a folder: compiles into one folder take turns at renaming,
// so their pairs of files cannot interleave.
class FolderLock {
public:
    explicit FolderLock(const fs::path& dir) {
        fd_ = ::open(dir.empty() ? "." : dir.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
        if (fd_ >= 0)
            while (::flock(fd_, LOCK_EX) != 0 && errno == EINTR) {
            }
    }
    ~FolderLock() {
        if (fd_ >= 0) ::close(fd_);  // closing releases the lock
    }
    FolderLock(const FolderLock&) = delete;
    FolderLock& operator=(const FolderLock&) = delete;

private:
    int fd_ = -1;
};

void sync_folder(const fs::path& dir) {
    const int fd = ::open(dir.empty() ? "." : dir.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
    if (fd < 0) return;
    ::fsync(fd);
    ::close(fd);
}

}  // namespace

void set_rename_for_tests(int (*rename_fn)(const char*, const char*)) { g_rename = rename_fn ? rename_fn : &::rename; }

bool write_file_atomic(const std::string& path, std::string_view content, Diagnostics& diags) {
    return write_files_atomic({{path, std::string(content)}}, diags);
}

bool write_files_atomic(const std::vector<std::pair<std::string, std::string>>& files, Diagnostics& diags) {
    // Phase 1: every file goes to its own new temporary, flushed to the disk.
    // A failure here leaves every existing file as it was.
    struct Staged {
        fs::path tmp, target, backup;   // backup: a hard link to the replaced file, empty when none
    };
    std::vector<Staged> staged;
    auto discard = [&staged]() {
        for (const auto& s : staged) {
            ::unlink(s.tmp.c_str());
            if (!s.backup.empty()) ::unlink(s.backup.c_str());
        }
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
        staged.push_back({tmp, target, {}});
    }
    // Phase 2, under each folder's lock: keep a hard link to every file that
    // is replaced, rename the temporaries over the targets, and when a rename
    // fails put the old files back, so the folder holds the old set or the
    // new set. Only a crash between two renames can leave a mixed set; the
    // emitted source's stamp check then stops its build with #error.
    std::vector<fs::path> folders;
    for (const auto& s : staged) folders.push_back(s.target.parent_path());
    std::sort(folders.begin(), folders.end());
    folders.erase(std::unique(folders.begin(), folders.end()), folders.end());
    std::vector<std::unique_ptr<FolderLock>> locks;
    for (const auto& f : folders) locks.push_back(std::make_unique<FolderLock>(f));
    for (auto& s : staged) {
        struct stat st {};
        if (::lstat(s.target.c_str(), &st) != 0 || !S_ISREG(st.st_mode)) continue;
        std::string backup;
        const int fd = create_unique(s.target, backup);
        if (fd < 0) continue;  // no backup: this file cannot be restored, the others still can
        ::close(fd);
        ::unlink(backup.c_str());
        // link(2) never follows or replaces what is at the new name.
        if (::link(s.target.c_str(), backup.c_str()) == 0) s.backup = backup;
    }
    for (std::size_t i = 0; i < staged.size(); ++i) {
        if (g_rename(staged[i].tmp.c_str(), staged[i].target.c_str()) == 0) continue;
        const int err = errno;
        diags.error(files[i].first, fmt::format("cannot write file: {}", std::strerror(err)));
        for (std::size_t j = 0; j < i; ++j) {  // undo the renames done
            if (!staged[j].backup.empty()) {
                if (::rename(staged[j].backup.c_str(), staged[j].target.c_str()) == 0) staged[j].backup.clear();
            } else {
                ::unlink(staged[j].target.c_str());  // it did not exist before
            }
        }
        for (std::size_t j = i; j < staged.size(); ++j) ::unlink(staged[j].tmp.c_str());
        for (const auto& s : staged)
            if (!s.backup.empty()) ::unlink(s.backup.c_str());
        return false;
    }
    for (const auto& s : staged)
        if (!s.backup.empty()) ::unlink(s.backup.c_str());
    // Durability of the renames themselves.
    for (const auto& f : folders) sync_folder(f);
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

std::string format_double(double v) { return fmt::format("{}", v); }
std::string format_float(float v) { return fmt::format("{}", v); }

}  // namespace meander
