// Weights: the NumPy .npy format (NEP 1), .npz archives through libzip, a
// folder of .npy files, meander's weight listing (.mnw), and binding the
// tensors to the model's dense layers.
#include "weights.hpp"

#include <fmt/format.h>
#include <fmt/ranges.h>
#include <zip.h>

#include <algorithm>
#include <cctype>
#include <charconv>
#include <cmath>
#include <cstdint>
#include <cstring>
#include <filesystem>
#include <limits>
#include <string_view>
#include <system_error>

namespace meander {

const Tensor* TensorSet::find(const std::string& name) const {
    for (const auto& t : tensors)
        if (t.name == name) return &t;
    return nullptr;
}

namespace {

namespace fs = std::filesystem;

constexpr std::size_t max_rank = 4;

// Python's spelling of a shape: (), (16,), (16, 6).
std::string shape_text(const std::vector<std::size_t>& shape) {
    if (shape.size() == 1) return fmt::format("({},)", shape[0]);
    return fmt::format("({})", fmt::join(shape, ", "));
}

// Element count, or nullopt when the product overflows.
std::optional<std::size_t> element_count(const std::vector<std::size_t>& shape) {
    std::size_t n = 1;
    for (std::size_t d : shape) {
        if (d != 0 && n > std::numeric_limits<std::size_t>::max() / d) return std::nullopt;
        n *= d;
    }
    return n;
}

std::string lower(std::string s) {
    for (char& c : s)
        if (c >= 'A' && c <= 'Z') c = static_cast<char>(c - 'A' + 'a');
    return s;
}

bool host_is_little() {
    const std::uint16_t one = 1;
    unsigned char b[2];
    std::memcpy(b, &one, 2);
    return b[0] == 1;
}

// ---------------------------------------------------------------------------
// .npy (NEP 1): magic "\x93NUMPY", major, minor, header length (2 bytes in
// version 1.0, 4 bytes in 2.0 and 3.0, little-endian), then a Python dict
// literal with exactly 'descr', 'fortran_order' and 'shape', then the data.

struct NpyHeader {
    std::string descr;
    bool fortran_order = false;
    std::vector<std::size_t> shape;
};

// A strict reader of the small subset of Python literals NumPy writes.
class HeaderReader {
public:
    explicit HeaderReader(std::string_view s) : s_(s) {}

    std::optional<NpyHeader> read(std::string& error) {
        NpyHeader h;
        bool seen_descr = false, seen_fortran = false, seen_shape = false;
        skip_space();
        if (!eat('{')) {
            error = fmt::format("header is not a dict: {}", excerpt());
            return std::nullopt;
        }
        while (true) {
            skip_space();
            if (eat('}')) break;
            std::string key;
            if (!string_literal(key, error)) {
                if (error.empty()) error = "bad header: expected a quoted key or '}'";
                return std::nullopt;
            }
            skip_space();
            if (!eat(':')) {
                error = fmt::format("bad header: expected ':' after the key '{}'", key);
                return std::nullopt;
            }
            skip_space();
            bool* seen = key == "descr" ? &seen_descr : key == "fortran_order" ? &seen_fortran
                       : key == "shape" ? &seen_shape : nullptr;
            if (!seen) {
                error = fmt::format("bad header: unknown key '{}'", key);
                return std::nullopt;
            }
            if (*seen) {
                error = fmt::format("bad header: duplicate key '{}'", key);
                return std::nullopt;
            }
            *seen = true;
            bool ok = key == "descr" ? descr(h.descr, error)
                    : key == "fortran_order" ? boolean(h.fortran_order, error)
                    : shape(h.shape, error);
            if (!ok) return std::nullopt;
            skip_space();
            if (eat(',')) continue;
            if (eat('}')) break;
            error = fmt::format("bad header: expected ',' or '}}' after the value of '{}'", key);
            return std::nullopt;
        }
        skip_space();
        if (pos_ != s_.size()) {
            error = "bad header: text after the closing '}'";
            return std::nullopt;
        }
        const char* missing = !seen_descr ? "descr" : !seen_fortran ? "fortran_order" : !seen_shape ? "shape" : nullptr;
        if (missing) {
            error = fmt::format("bad header: missing key '{}'", missing);
            return std::nullopt;
        }
        return h;
    }

private:
    std::string_view s_;
    std::size_t pos_ = 0;

    bool at_end() const { return pos_ >= s_.size(); }
    char peek() const { return at_end() ? '\0' : s_[pos_]; }
    bool eat(char c) {
        if (peek() != c || at_end()) return false;
        ++pos_;
        return true;
    }
    void skip_space() {
        while (!at_end() && (s_[pos_] == ' ' || s_[pos_] == '\t' || s_[pos_] == '\n' || s_[pos_] == '\r')) ++pos_;
    }
    // The header text, trimmed and cut short, with unprintable bytes escaped.
    std::string excerpt() const {
        std::size_t b = 0, e = s_.size();
        while (b < e && (s_[b] == ' ' || s_[b] == '\n')) ++b;
        while (e > b && (s_[e - 1] == ' ' || s_[e - 1] == '\n')) --e;
        std::string out;
        for (std::size_t i = b; i < e && i < b + 40; ++i) {
            unsigned char c = static_cast<unsigned char>(s_[i]);
            if (c >= 0x20 && c < 0x7f) out += static_cast<char>(c);
            else out += fmt::format("\\x{:02x}", c);
        }
        if (e > b + 40) out += "...";
        return out.empty() ? "(empty)" : out;
    }
    // A quoted string without escapes (NumPy never writes any in a header).
    // Returns false with an empty error when there is no quote here.
    bool string_literal(std::string& out, std::string& error) {
        char q = peek();
        if (q != '\'' && q != '"') return false;
        ++pos_;
        std::size_t start = pos_;
        while (!at_end() && s_[pos_] != q) {
            if (s_[pos_] == '\\') {
                error = "bad header: escapes in strings are not read";
                return false;
            }
            ++pos_;
        }
        if (at_end()) {
            error = "bad header: unterminated string";
            return false;
        }
        out = std::string(s_.substr(start, pos_ - start));
        ++pos_;
        return true;
    }
    bool descr(std::string& out, std::string& error) {
        if (string_literal(out, error)) return true;
        if (error.empty())
            error = "bad header: 'descr' must be a string such as '<f4' (structured dtypes are not read)";
        return false;
    }
    bool word(std::string_view w) {
        if (s_.substr(pos_, w.size()) != w) return false;
        std::size_t after = pos_ + w.size();
        if (after < s_.size() && (std::isalnum(static_cast<unsigned char>(s_[after])) || s_[after] == '_')) return false;
        pos_ = after;
        return true;
    }
    bool boolean(bool& out, std::string& error) {
        if (word("True")) { out = true; return true; }
        if (word("False")) { out = false; return true; }
        error = "bad header: 'fortran_order' must be True or False";
        return false;
    }
    bool shape(std::vector<std::size_t>& out, std::string& error) {
        const char* not_tuple = "bad header: 'shape' must be a tuple of non-negative integers";
        if (!eat('(')) {
            error = not_tuple;
            return false;
        }
        skip_space();
        if (eat(')')) return true;
        while (true) {
            std::size_t start = pos_;
            while (!at_end() && s_[pos_] >= '0' && s_[pos_] <= '9') ++pos_;
            std::string_view digits = s_.substr(start, pos_ - start);
            if (digits.empty() || (digits.size() > 1 && digits[0] == '0')) {
                error = not_tuple;
                return false;
            }
            std::size_t d = 0;
            auto r = std::from_chars(digits.data(), digits.data() + digits.size(), d);
            if (r.ec != std::errc()) {
                error = fmt::format("bad header: dimension {} is too large", digits);
                return false;
            }
            out.push_back(d);
            skip_space();
            if (eat(',')) {
                skip_space();
                if (eat(')')) return true;
                continue;
            }
            if (eat(')')) {
                if (out.size() == 1) {
                    // Python reads "(3)" as the number 3.
                    error = fmt::format("bad header: 'shape' must be a tuple: ({}) is a number, a tuple is ({},)", d, d);
                    return false;
                }
                return true;
            }
            error = not_tuple;
            return false;
        }
    }
};

std::uint64_t read_le(std::string_view b, std::size_t at, std::size_t n) {
    std::uint64_t v = 0;
    for (std::size_t i = 0; i < n; ++i) v |= static_cast<std::uint64_t>(static_cast<unsigned char>(b[at + i])) << (8 * i);
    return v;
}

// Parses a whole .npy image; on failure returns nullopt and sets `error`.
std::optional<Tensor> parse_npy(std::string_view bytes, std::string name, std::string& error) {
    static const char magic[] = "\x93NUMPY";
    if (bytes.size() < 6 || bytes.substr(0, 6) != std::string_view(magic, 6)) {
        error = "not a .npy file: bad magic bytes";
        return std::nullopt;
    }
    if (bytes.size() < 8) {
        error = "header is truncated";
        return std::nullopt;
    }
    int major = static_cast<unsigned char>(bytes[6]);
    int minor = static_cast<unsigned char>(bytes[7]);
    if (major < 1 || major > 3 || minor != 0) {
        error = fmt::format("unsupported .npy format version {}.{} (1.0, 2.0 and 3.0 are read)", major, minor);
        return std::nullopt;
    }
    std::size_t len_bytes = major == 1 ? 2 : 4;
    if (bytes.size() < 8 + len_bytes) {
        error = "header is truncated";
        return std::nullopt;
    }
    std::uint64_t header_len = read_le(bytes, 8, len_bytes);
    std::size_t header_start = 8 + len_bytes;
    if (header_len > bytes.size() - header_start) {
        error = fmt::format("header is truncated: it declares {} bytes, {} present", header_len, bytes.size() - header_start);
        return std::nullopt;
    }
    std::string_view header_text = bytes.substr(header_start, static_cast<std::size_t>(header_len));
    HeaderReader reader(header_text);
    auto h = reader.read(error);
    if (!h) return std::nullopt;

    const std::string& d = h->descr;
    bool f4 = d.size() == 3 && d[1] == 'f' && d[2] == '4';
    bool f8 = d.size() == 3 && d[1] == 'f' && d[2] == '8';
    if (!(f4 || f8) || std::string_view("<>=|").find(d[0]) == std::string_view::npos) {
        error = fmt::format("unsupported dtype '{}': meander reads float32 ('<f4', '>f4') and float64 ('<f8', '>f8')", d);
        return std::nullopt;
    }
    if (h->fortran_order) {
        error = "fortran_order is True: meander reads C-order arrays only (save np.ascontiguousarray(a))";
        return std::nullopt;
    }
    if (h->shape.size() > max_rank) {
        error = fmt::format("shape {} has rank {}: at most {} dimensions are read", shape_text(h->shape), h->shape.size(), max_rank);
        return std::nullopt;
    }
    const std::size_t item = f4 ? 4 : 8;
    const char* dtype = f4 ? "float32" : "float64";
    auto count = element_count(h->shape);
    if (!count || *count > std::numeric_limits<std::size_t>::max() / item) {
        error = fmt::format("shape {} is too large", shape_text(h->shape));
        return std::nullopt;
    }
    // Sizes are checked before anything is allocated: a damaged header may
    // declare a shape far larger than the file.
    std::size_t need = *count * item;
    std::size_t have = bytes.size() - header_start - static_cast<std::size_t>(header_len);
    if (need != have) {
        error = fmt::format("{}: shape {} of {} needs {} bytes of data, {} present",
                            need > have ? "data is truncated" : "unexpected bytes after the data",
                            shape_text(h->shape), dtype, need, have);
        return std::nullopt;
    }
    bool little = d[0] == '<' || ((d[0] == '=' || d[0] == '|') && host_is_little());
    bool swap = little != host_is_little();
    Tensor t;
    t.name = std::move(name);
    t.shape = h->shape;
    t.dtype = dtype;
    t.values.resize(*count);
    const char* p = bytes.data() + header_start + header_len;
    for (std::size_t i = 0; i < *count; ++i, p += item) {
        unsigned char b[8];
        std::memcpy(b, p, item);
        if (swap) std::reverse(b, b + item);
        if (f4) {
            float v;
            std::memcpy(&v, b, 4);
            t.values[i] = static_cast<double>(v);
        } else {
            double v;
            std::memcpy(&v, b, 8);
            t.values[i] = v;
        }
    }
    return t;
}

// Name of a tensor stored as "STEM.npy" (case of the suffix ignored).
bool npy_stem(const std::string& file, std::string& stem) {
    if (file.size() <= 4 || lower(file.substr(file.size() - 4)) != ".npy") return false;
    stem = file.substr(0, file.size() - 4);
    return true;
}

std::optional<TensorSet> read_npy_file(const std::string& path, Diagnostics& diags) {
    auto bytes = read_file(path, diags);
    if (!bytes) return std::nullopt;
    std::string error;
    auto t = parse_npy(*bytes, fs::path(path).stem().string(), error);
    if (!t) {
        diags.error(path, error);
        return std::nullopt;
    }
    TensorSet set;
    set.path = path;
    set.tensors.push_back(std::move(*t));
    return set;
}

// The .npy files of a folder, sorted by file name (bytewise) for determinism.
std::optional<std::vector<std::string>> npy_files_in(const std::string& folder, Diagnostics& diags) {
    std::error_code ec;
    std::vector<std::string> names;
    fs::directory_iterator it(folder, ec), end;
    for (; !ec && it != end; it.increment(ec)) {
        std::string stem;
        std::error_code fec;
        if (it->is_regular_file(fec) && npy_stem(it->path().filename().string(), stem))
            names.push_back(it->path().filename().string());
    }
    if (ec) {
        diags.error(folder, fmt::format("cannot read folder: {}", ec.message()));
        return std::nullopt;
    }
    std::sort(names.begin(), names.end());
    return names;
}

std::optional<TensorSet> read_npy_folder(const std::string& path, Diagnostics& diags) {
    auto names = npy_files_in(path, diags);
    if (!names) return std::nullopt;
    if (names->empty()) {
        diags.error(path, "no .npy files in this folder");
        return std::nullopt;
    }
    TensorSet set;
    set.path = path;
    bool ok = true;
    for (const auto& file : *names) {
        std::string full = (fs::path(path) / file).string();
        auto bytes = read_file(full, diags);
        if (!bytes) { ok = false; continue; }
        std::string stem, error;
        npy_stem(file, stem);
        auto t = parse_npy(*bytes, stem, error);
        if (!t) {
            diags.error(full, error);
            ok = false;
            continue;
        }
        set.tensors.push_back(std::move(*t));
    }
    if (!ok) return std::nullopt;
    return set;
}

// ---------------------------------------------------------------------------
// .npz: a zip archive of NAME.npy members (numpy.savez stores them,
// numpy.savez_compressed deflates them).

std::string zip_problem(int code, zip_error_t* err) {
    switch (code) {
    case ZIP_ER_NOZIP: return "not a zip archive";
    case ZIP_ER_INCONS: return "the zip directory is damaged";
    case ZIP_ER_CRC: return "CRC mismatch";
    case ZIP_ER_ZLIB:
    case ZIP_ER_COMPRESSED_DATA: return "the compressed data is invalid";
    case ZIP_ER_EOF: return "the data ends early";
    case ZIP_ER_COMPNOTSUPP: return "compression method not supported";
    case ZIP_ER_ENCRNOTSUPP:
    case ZIP_ER_NOPASSWD: return "encrypted members are not read";
    default: return zip_error_strerror(err);
    }
}

struct ZipArchive {
    zip_t* za = nullptr;
    ~ZipArchive() { if (za) zip_discard(za); }
};

struct ZipFile {
    zip_file_t* zf = nullptr;
    ~ZipFile() { if (zf) zip_fclose(zf); }
};

// Far beyond any weights a microcontroller can hold; a larger member is
// refused before it is inflated into memory.
constexpr zip_uint64_t kMaxMemberBytes = zip_uint64_t{256} << 20;

// Reads member `index` whole; on failure sets `error`.
std::optional<std::string> read_member(zip_t* za, zip_uint64_t index, const zip_stat_t& st, std::string& error) {
    if ((st.valid & ZIP_STAT_SIZE) && st.size > kMaxMemberBytes) {
        error = fmt::format("{} bytes, more than meander reads for one tensor ({} bytes)", st.size, kMaxMemberBytes);
        return std::nullopt;
    }
    if ((st.valid & ZIP_STAT_SIZE) && (st.valid & ZIP_STAT_COMP_SIZE) && (st.valid & ZIP_STAT_COMP_METHOD)) {
        // Deflate expands at most about 1032:1; a larger claim is damage.
        bool stored = st.comp_method == ZIP_CM_STORE;
        if ((stored && st.size != st.comp_size) || (!stored && st.size / 1100 > st.comp_size + 1)) {
            error = fmt::format("damaged: it declares {} bytes from {} stored bytes", st.size, st.comp_size);
            return std::nullopt;
        }
    }
    ZipFile f;
    f.zf = zip_fopen_index(za, index, 0);
    if (!f.zf) {
        zip_error_t* err = zip_get_error(za);
        error = fmt::format("cannot open: {}", zip_problem(zip_error_code_zip(err), err));
        return std::nullopt;
    }
    std::string data;
    char buf[1 << 15];
    while (true) {
        zip_int64_t n = zip_fread(f.zf, buf, sizeof buf);
        if (n < 0) {
            zip_error_t* err = zip_file_get_error(f.zf);
            error = fmt::format("damaged: {}", zip_problem(zip_error_code_zip(err), err));
            return std::nullopt;
        }
        if (n == 0) break;
        data.append(buf, static_cast<std::size_t>(n));
        if (data.size() > kMaxMemberBytes) {
            error = fmt::format("more than meander reads for one tensor ({} bytes)", kMaxMemberBytes);
            return std::nullopt;
        }
        if ((st.valid & ZIP_STAT_SIZE) && data.size() > st.size) break;
    }
    if ((st.valid & ZIP_STAT_SIZE) && data.size() != st.size) {
        error = fmt::format("damaged: {} bytes read, {} declared", data.size(), st.size);
        return std::nullopt;
    }
    return data;
}

std::optional<TensorSet> read_npz(const std::string& path, Diagnostics& diags) {
    auto bytes = read_file(path, diags);
    if (!bytes) return std::nullopt;
    zip_error_t err;
    zip_error_init(&err);
    zip_source_t* src = zip_source_buffer_create(bytes->data(), bytes->size(), 0, &err);
    ZipArchive ar;
    if (src) {
        ar.za = zip_open_from_source(src, ZIP_RDONLY | ZIP_CHECKCONS, &err);
        if (!ar.za) zip_source_free(src);
    }
    if (!ar.za) {
        // The archive is already in memory: a missing entry, a short read or a
        // bad seek all mean its directory points where nothing is.
        int code = zip_error_code_zip(&err);
        if (code == ZIP_ER_NOENT || code == ZIP_ER_SEEK || code == ZIP_ER_READ || code == ZIP_ER_EOF) code = ZIP_ER_INCONS;
        // A file that starts like a zip archive is a damaged one, not some other file.
        if (code == ZIP_ER_NOZIP && bytes->compare(0, 4, "PK\x03\x04") == 0) code = ZIP_ER_INCONS;
        diags.error(path, fmt::format("cannot open the .npz archive: {}", zip_problem(code, &err)));
        zip_error_fini(&err);
        return std::nullopt;
    }
    zip_error_fini(&err);

    TensorSet set;
    set.path = path;
    bool ok = true;
    zip_int64_t n = zip_get_num_entries(ar.za, 0);
    for (zip_int64_t i = 0; i < n; ++i) {
        auto index = static_cast<zip_uint64_t>(i);
        zip_stat_t st;
        zip_stat_init(&st);
        if (zip_stat_index(ar.za, index, 0, &st) != 0 || !(st.valid & ZIP_STAT_NAME)) {
            diags.error(path, fmt::format("member {} of the archive is unreadable", i + 1));
            ok = false;
            continue;
        }
        std::string member = st.name;
        if (!member.empty() && member.back() == '/') continue;  // a folder entry
        std::string stem;
        if (!npy_stem(member, stem)) {
            diags.error(path, fmt::format("member '{}' is not a .npy array (an .npz holds NAME.npy members)", member));
            ok = false;
            continue;
        }
        if (set.find(stem)) {
            diags.error(path, fmt::format("member '{}' appears twice", member));
            ok = false;
            continue;
        }
        std::string error;
        auto data = read_member(ar.za, index, st, error);
        std::optional<Tensor> t;
        if (data) t = parse_npy(*data, stem, error);
        if (!t) {
            diags.error(path, fmt::format("member '{}': {}", member, error));
            ok = false;
            continue;
        }
        set.tensors.push_back(std::move(*t));
    }
    if (!ok) return std::nullopt;
    if (set.tensors.empty()) {
        diags.error(path, "the .npz archive holds no .npy arrays");
        return std::nullopt;
    }
    return set;
}

// ---------------------------------------------------------------------------
// The weight listing (.mnw); DEVELOPERS.md "Weight listing (.mnw)" describes it.

constexpr std::size_t values_per_line = 8;

struct Token {
    std::string text;
    int col = 0;          // 1-based byte column of its first character
    int end_col = 0;      // 1-based byte column just past its last character
    bool quoted = false;
};

// Splits a line into tokens at spaces and tabs; '#' outside quotes starts a
// comment. On a bad quoted name sets `error` and `error_col`.
std::vector<Token> tokenize(std::string_view line, std::string& error, int& error_col) {
    std::vector<Token> out;
    std::size_t i = 0;
    while (i < line.size()) {
        char c = line[i];
        if (c == ' ' || c == '\t') { ++i; continue; }
        if (c == '#') break;
        Token t;
        t.col = static_cast<int>(i + 1);
        if (c == '"') {
            t.quoted = true;
            ++i;
            bool closed = false;
            while (i < line.size()) {
                char q = line[i];
                if (q == '"') { closed = true; ++i; break; }
                if (q == '\\') {
                    char e = i + 1 < line.size() ? line[i + 1] : '\0';
                    if (e == '"' || e == '\\') t.text += e;
                    else if (e == 'n') t.text += '\n';
                    else {
                        error = "unknown escape in a quoted name (\\\", \\\\ and \\n are known)";
                        error_col = static_cast<int>(i + 1);
                        return {};
                    }
                    i += 2;
                    continue;
                }
                t.text += q;
                ++i;
            }
            if (!closed) {
                error = "unterminated quoted name";
                error_col = t.col;
                return {};
            }
            if (i < line.size() && line[i] != ' ' && line[i] != '\t' && line[i] != '#') {
                error = "expected a space after the quoted name";
                error_col = static_cast<int>(i + 1);
                return {};
            }
        } else {
            while (i < line.size() && line[i] != ' ' && line[i] != '\t' && line[i] != '#') t.text += line[i++];
        }
        t.end_col = static_cast<int>(i + 1);
        out.push_back(std::move(t));
    }
    return out;
}

// A name that needs no quotes: printable, without space, '#', '"' or a backslash.
bool bare_name(const std::string& name) {
    if (name.empty()) return false;
    for (unsigned char c : name)
        if (c <= 0x20 || c == 0x7f || c == '#' || c == '"' || c == '\\') return false;
    return true;
}

std::string name_token(const std::string& name) {
    if (bare_name(name)) return name;
    std::string out = "\"";
    for (char c : name) {
        if (c == '"' || c == '\\') { out += '\\'; out += c; }
        else if (c == '\n') out += "\\n";
        else out += c;
    }
    return out + "\"";
}

class ListingReader {
public:
    ListingReader(const std::string& path, std::string text, Diagnostics& diags)
        : src_(path, std::move(text)), diags_(diags) {}

    std::optional<TensorSet> read() {
        TensorSet set;
        set.path = src_.path;
        bool have_version = false;
        int lines = static_cast<int>(src_.line_starts.size());
        for (int ln = 1; ln <= lines; ++ln) {
            std::string_view line = src_.line_text(ln);
            std::string error;
            int error_col = 0;
            auto toks = tokenize(line, error, error_col);
            if (!error.empty()) {
                fail(ln, error_col, error);
                return std::nullopt;
            }
            if (toks.empty()) continue;
            if (!have_version) {
                if (!version_line(ln, toks)) return std::nullopt;
                have_version = true;
            } else if (lines_left_ > 0) {
                if (!value_line(ln, toks, set.tensors.back())) return std::nullopt;
            } else {
                if (!header_line(ln, toks, set)) return std::nullopt;
            }
        }
        if (!have_version) {
            fail(1, 1, "expected 'meander-weights 1' on the first line of a weight listing");
            return std::nullopt;
        }
        if (lines_left_ > 0) {
            const Tensor& t = set.tensors.back();
            fail(header_loc_.line, header_loc_.col,
                 fmt::format("tensor '{}' is incomplete: the listing ends after {} of its {} value lines",
                             t.name, lines_total_ - lines_left_, lines_total_));
            return std::nullopt;
        }
        return set;
    }

private:
    Source src_;
    Diagnostics& diags_;
    std::size_t lines_total_ = 0, lines_left_ = 0;   // value lines of the current tensor
    std::size_t row_len_ = 0, row_left_ = 0;         // values of the current row
    std::size_t row_ = 0;                            // 0-based index of the current row
    Loc header_loc_;                                 // name of the current tensor
    std::vector<int> first_line_;                    // header line of each tensor

    bool fail(int line, int col, std::string message) {
        diags_.error(src_, Loc{line, col}, std::move(message));
        return false;
    }
    // Column just past the last token.
    static int end_col(const std::vector<Token>& toks) { return toks.back().end_col; }

    bool version_line(int ln, const std::vector<Token>& toks) {
        if (toks[0].quoted || toks[0].text != "meander-weights" || toks.size() < 2)
            return fail(ln, toks[0].col, "expected 'meander-weights 1' on the first line of a weight listing");
        if (toks[1].text != "1")
            return fail(ln, toks[1].col, fmt::format("unsupported weight listing version '{}' (this meander reads version 1)", toks[1].text));
        if (toks.size() > 2)
            return fail(ln, toks[2].col, "unexpected text after the version");
        return true;
    }

    bool header_line(int ln, const std::vector<Token>& toks, TensorSet& set) {
        const char* form = "'tensor NAME DTYPE DIM...'";
        if (toks[0].quoted || toks[0].text != "tensor")
            return fail(ln, toks[0].col, fmt::format("expected a tensor header {}", form));
        if (toks.size() < 2)
            return fail(ln, end_col(toks), "expected a tensor name after 'tensor'");
        const Token& name = toks[1];
        if (name.text.empty())
            return fail(ln, name.col, "a tensor name cannot be empty");
        for (std::size_t i = 0; i < set.tensors.size(); ++i)
            if (set.tensors[i].name == name.text)
                return fail(ln, name.col, fmt::format("duplicate tensor '{}' (first listed at line {})", name.text, first_line_[i]));
        if (toks.size() < 3)
            return fail(ln, end_col(toks), "expected a dtype (float32 or float64) after the tensor name");
        const Token& dt = toks[2];
        if (dt.quoted || (dt.text != "float32" && dt.text != "float64"))
            return fail(ln, dt.col, fmt::format("unknown dtype '{}' (float32 or float64)", dt.text));
        Tensor t;
        t.name = name.text;
        t.dtype = dt.text;
        for (std::size_t i = 3; i < toks.size(); ++i) {
            const Token& d = toks[i];
            if (t.shape.size() == max_rank)
                return fail(ln, d.col, fmt::format("tensor '{}' has more than {} dimensions", t.name, max_rank));
            std::size_t v = 0;
            auto r = std::from_chars(d.text.data(), d.text.data() + d.text.size(), v);
            bool digits = !d.quoted && !d.text.empty() &&
                          std::all_of(d.text.begin(), d.text.end(), [](char c) { return c >= '0' && c <= '9'; });
            if (!digits || r.ec != std::errc() || r.ptr != d.text.data() + d.text.size())
                return fail(ln, d.col, fmt::format("expected a dimension (a non-negative integer), found '{}'", d.text));
            t.shape.push_back(v);
        }
        auto count = element_count(t.shape);
        // Every value takes at least two characters, so a count beyond the
        // text's length is a mistake, caught before reserving memory.
        if (!count || *count > src_.text.size())
            return fail(ln, name.col, fmt::format("tensor '{}' declares {} values, more than the listing holds",
                                                   t.name, count ? fmt::format("{}", *count) : std::string("too many")));
        t.values.reserve(*count);
        row_len_ = t.shape.empty() ? 1 : t.shape.back();
        std::size_t rows = row_len_ == 0 ? 0 : *count / row_len_;
        lines_total_ = lines_left_ = rows * ((row_len_ + values_per_line - 1) / values_per_line);
        row_left_ = row_len_;
        row_ = 0;
        header_loc_ = Loc{ln, name.col};
        first_line_.push_back(ln);
        set.tensors.push_back(std::move(t));
        return true;
    }

    bool value_line(int ln, const std::vector<Token>& toks, Tensor& t) {
        if (!toks[0].quoted && toks[0].text == "tensor")
            return fail(ln, toks[0].col, fmt::format("tensor '{}' is incomplete: a new tensor starts after {} of its {} value lines",
                                                      t.name, lines_total_ - lines_left_, lines_total_));
        std::size_t want = std::min(values_per_line, row_left_);
        if (toks.size() != want) {
            int col = toks.size() < want ? end_col(toks) : toks[want].col;
            return fail(ln, col, fmt::format("tensor '{}' row {}: expected {} values on this line, found {}",
                                              t.name, row_, want, toks.size()));
        }
        bool f32 = t.dtype == "float32";
        for (const Token& tok : toks) {
            const char* b = tok.text.data();
            const char* e = b + tok.text.size();
            double v = 0;
            std::from_chars_result r;
            if (f32) {
                float f = 0;
                r = std::from_chars(b, e, f);
                v = static_cast<double>(f);
            } else {
                r = std::from_chars(b, e, v);
            }
            if (tok.quoted || tok.text.empty() || (r.ec != std::errc() && r.ec != std::errc::result_out_of_range) || r.ptr != e)
                return fail(ln, tok.col, fmt::format("expected a {} number, found '{}'", t.dtype, tok.text));
            if (r.ec == std::errc::result_out_of_range)
                return fail(ln, tok.col, fmt::format("{} is out of range for {}", tok.text, t.dtype));
            t.values.push_back(v);
        }
        row_left_ -= want;
        if (row_left_ == 0) {
            row_left_ = row_len_;
            ++row_;
        }
        --lines_left_;
        return true;
    }
};

std::optional<TensorSet> read_listing(const std::string& path, Diagnostics& diags) {
    auto text = read_file(path, diags);
    if (!text) return std::nullopt;
    ListingReader reader(path, std::move(*text), diags);
    return reader.read();
}

// ---------------------------------------------------------------------------
// Binding.

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

bool ends_with(const std::string& s, const std::string& suffix) {
    return s.size() >= suffix.size() && s.compare(s.size() - suffix.size(), suffix.size(), suffix) == 0;
}

std::string quoted_list(const std::vector<std::string>& names, std::size_t limit) {
    std::string out;
    for (std::size_t i = 0; i < names.size() && i < limit; ++i)
        out += fmt::format("{}'{}'", i ? ", " : "", names[i]);
    if (names.size() > limit) out += fmt::format(" and {} more", names.size() - limit);
    return out;
}

std::string count_text(std::size_t n, const char* word) {
    return fmt::format("{} {}{}", n, word, n == 1 ? "" : "s");
}

class Binder {
public:
    Binder(const Source& src, const TensorSet& set, Diagnostics& diags)
        : src_(src), set_(set), diags_(diags), used_(set.tensors.size(), false) {}

    // Names some layer asks for: never offered as a close name to another.
    void collect(const std::vector<Block>& bs) {
        for (const auto& b : bs) {
            if (b.kind == Block::Kind::dense) {
                wanted_.push_back(weight_name(b.dense));
                if (b.dense.has_bias) wanted_.push_back(bias_name(b.dense));
            } else if (b.kind == Block::Kind::residual) {
                collect(b.residual.body);
            } else {
                collect(b.continuous.field);
            }
        }
    }

    void blocks(std::vector<Block>& bs) {
        for (auto& b : bs) {
            if (b.kind == Block::Kind::dense) dense(b.dense);
            else if (b.kind == Block::Kind::residual) blocks(b.residual.body);
            else blocks(b.continuous.field);
        }
    }

    void unused(const Model& model) {
        std::vector<std::string> names;
        for (std::size_t i = 0; i < used_.size(); ++i)
            if (!used_[i]) names.push_back(set_.tensors[i].name);
        if (names.empty()) return;
        std::string msg = names.size() == 1
            ? fmt::format("tensor '{}' in {} is not used by any layer", names[0], set_.path)
            : fmt::format("{} tensors in {} are not used by any layer: {}", names.size(), set_.path, quoted_list(names, 10));
        diags_.error(src_, model.weights_loc, msg);
        // A bias left over by a layer declared without one is the usual cause.
        for (const Dense* d : no_bias_)
            for (const auto& n : names)
                if (n == bias_name(*d))
                    diags_.note(src_, d->loc, fmt::format("layer '{}' is declared no-bias", d->name));
    }

private:
    const Source& src_;
    const TensorSet& set_;
    Diagnostics& diags_;
    std::vector<bool> used_;
    std::vector<const Dense*> no_bias_;
    std::vector<std::string> wanted_;

    static std::string weight_name(const Dense& d) { return d.weight_tensor.empty() ? d.name + ".weight" : d.weight_tensor; }
    static std::string bias_name(const Dense& d) { return d.bias_tensor.empty() ? d.name + ".bias" : d.bias_tensor; }

    const Tensor* lookup(const Dense& d, const std::string& name) {
        for (std::size_t i = 0; i < set_.tensors.size(); ++i)
            if (set_.tensors[i].name == name) {
                used_[i] = true;
                return &set_.tensors[i];
            }
        // Close names: a small edit away, or the same name under a prefix
        // (a module path from the training script).
        std::vector<std::pair<std::size_t, std::string>> close;
        std::size_t limit = std::max<std::size_t>(2, std::min<std::size_t>(3, name.size() / 4));
        for (const auto& t : set_.tensors) {
            if (std::find(wanted_.begin(), wanted_.end(), t.name) != wanted_.end()) continue;
            std::size_t dist = edit_distance(name, t.name);
            if (dist <= limit || ends_with(t.name, "." + name) || ends_with(name, "." + t.name)) close.emplace_back(dist, t.name);
        }
        std::sort(close.begin(), close.end());
        std::string msg = fmt::format("layer '{}': no tensor '{}' in {}", d.name, name, set_.path);
        if (!close.empty()) {
            std::vector<std::string> names;
            for (auto& c : close) names.push_back(c.second);
            msg += fmt::format("; close names: {}", quoted_list(names, 5));
        } else {
            msg += fmt::format(" (it holds {})", count_text(set_.tensors.size(), "tensor"));
        }
        diags_.error(src_, d.loc, msg);
        return nullptr;
    }

    bool shape_ok(const Dense& d, const Tensor& t, const std::vector<std::size_t>& want) {
        if (t.shape == want) {
            // The readers guarantee this; a set built in code might not.
            if (t.values.size() == *element_count(want)) return true;
            diags_.error(src_, d.loc, fmt::format("layer '{}': tensor '{}' holds {} values for its shape {}", d.name,
                                                  t.name, t.values.size(), shape_text(t.shape)));
            return false;
        }
        std::string msg = fmt::format("layer '{}': tensor '{}' has shape {}, expected {}", d.name, t.name,
                                      shape_text(t.shape), shape_text(want));
        if (want.size() == 2 && t.shape.size() == 2 && want[0] != want[1] && t.shape[0] == want[1] && t.shape[1] == want[0])
            msg += ": it looks transposed (a weight is (out, in))";
        else if (d.time_input && want.size() == 2 && t.shape.size() == 2 && t.shape[0] == want[0] && t.shape[1] + 1 == want[1])
            msg += ": with '+ t' the weight has one more column, for time (the last)";
        diags_.error(src_, d.loc, msg);
        return false;
    }

    bool finite(const Dense& d, const Tensor& t) {
        for (std::size_t i = 0; i < t.values.size(); ++i) {
            double v = t.values[i];
            if (std::isfinite(v)) continue;
            const char* what = std::isnan(v) ? "NaN" : v > 0 ? "inf" : "-inf";
            // The multi-index too: people look values up as w[i, j].
            std::vector<std::size_t> idx(t.shape.size());
            std::size_t rest = i;
            for (std::size_t k = t.shape.size(); k-- > 0;) {
                idx[k] = rest % t.shape[k];
                rest /= t.shape[k];
            }
            diags_.error(src_, d.loc, fmt::format("layer '{}': tensor '{}' holds {} at flat index {} [{}]",
                                                  d.name, t.name, what, i, fmt::join(idx, ", ")));
            return false;
        }
        return true;
    }

    void dense(Dense& d) {
        const std::size_t out = static_cast<std::size_t>(std::max(d.out, 0));
        const std::size_t in = static_cast<std::size_t>(std::max(d.in_total(), 0));
        const Tensor* w = lookup(d, weight_name(d));
        if (w && shape_ok(d, *w, {out, in}) && finite(d, *w)) {
            d.weight.resize(static_cast<Eigen::Index>(out), static_cast<Eigen::Index>(in));
            for (std::size_t r = 0; r < out; ++r)
                for (std::size_t c = 0; c < in; ++c)
                    d.weight(static_cast<Eigen::Index>(r), static_cast<Eigen::Index>(c)) = w->values[r * in + c];
        }
        if (!d.has_bias) {
            d.bias.resize(0);
            no_bias_.push_back(&d);
            return;
        }
        const Tensor* b = lookup(d, bias_name(d));
        if (b && shape_ok(d, *b, {out}) && finite(d, *b)) {
            d.bias.resize(static_cast<Eigen::Index>(out));
            for (std::size_t r = 0; r < out; ++r) d.bias(static_cast<Eigen::Index>(r)) = b->values[r];
        }
    }
};

}  // namespace

std::optional<TensorSet> read_weights(const std::string& path, Diagnostics& diags) {
    std::error_code ec;
    if (fs::is_directory(path, ec)) return read_npy_folder(path, diags);
    std::string ext = lower(fs::path(path).extension().string());
    if (ext == ".npz") return read_npz(path, diags);
    if (ext == ".npy") return read_npy_file(path, diags);
    if (ext == ".mnw") return read_listing(path, diags);
    diags.error(path, fmt::format("unknown weights format '{}': expected .npz, .npy, .mnw or a folder of .npy files",
                                  ext.empty() ? "(no extension)" : ext));
    return std::nullopt;
}

bool bind_weights(Model& model, const Source& src, const TensorSet& set, Diagnostics& diags) {
    int before = diags.error_count();
    Binder binder(src, set, diags);
    binder.collect(model.blocks);
    binder.blocks(model.blocks);
    binder.unused(model);
    return diags.error_count() == before;
}

std::string write_listing(const TensorSet& set) {
    std::string out = "meander-weights 1\n";
    for (const auto& t : set.tensors) {
        bool f32 = t.dtype == "float32";
        out += fmt::format("\ntensor {} {}", name_token(t.name), f32 ? "float32" : "float64");
        for (std::size_t d : t.shape) out += fmt::format(" {}", d);
        out += '\n';
        std::size_t row_len = t.shape.empty() ? 1 : t.shape.back();
        std::size_t in_row = 0, on_line = 0;
        for (double v : t.values) {
            if (on_line) out += ' ';
            out += f32 ? format_float(static_cast<float>(v)) : format_double(v);
            ++in_row;
            ++on_line;
            if (on_line == values_per_line || in_row == row_len) {
                out += '\n';
                on_line = 0;
                if (in_row == row_len) in_row = 0;
            }
        }
    }
    return out;
}

std::optional<std::string> weights_bytes(const std::string& path, Diagnostics& diags) {
    std::error_code ec;
    if (!fs::is_directory(path, ec)) return read_file(path, diags);
    auto names = npy_files_in(path, diags);
    if (!names) return std::nullopt;
    // Name and length before each file's bytes, so no two folders hash alike.
    std::string out;
    for (const auto& file : *names) {
        auto bytes = read_file((fs::path(path) / file).string(), diags);
        if (!bytes) return std::nullopt;
        out += fmt::format("{}\n{}\n", file, bytes->size());
        out += *bytes;
    }
    return out;
}

bool check_weight_range(const Model& model, const Source& src, Precision precision, Diagnostics& diags) {
    if (precision != Precision::float32) return true;
    const int before = diags.error_count();
    auto scan = [&](const Dense& d, const std::string& tensor, const double* v, Eigen::Index n) {
        Eigen::Index flushed = 0;
        for (Eigen::Index i = 0; i < n; ++i) {
            double a = std::fabs(v[i]);
            if (a > static_cast<double>(std::numeric_limits<float>::max())) {
                diags.error(src, d.loc,
                            fmt::format("layer '{}': tensor '{}' holds {} at flat index {}, beyond the float32 range "
                                        "(largest {}); emit with --precision float64 or rescale the layer",
                                        d.name, tensor, format_double(v[i]), i,
                                        format_float(std::numeric_limits<float>::max())));
                return;
            }
            if (a != 0.0 && static_cast<float>(v[i]) == 0.0f) ++flushed;
        }
        if (flushed)
            diags.warning(src, d.loc,
                          fmt::format("layer '{}': {} values of tensor '{}' are too small for float32 and become 0",
                                      d.name, flushed, tensor));
    };
    for_each_dense(model.blocks, [&](const Dense& d) {
        // Eigen stores the weight column-major; the order only matters for the index in the message.
        Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor> w = d.weight;
        scan(d, d.weight_tensor, w.data(), w.size());
        if (d.has_bias) scan(d, d.bias_tensor, d.bias.data(), d.bias.size());
    });
    return diags.error_count() == before;
}

}  // namespace meander
