// .npy (NEP 1): magic "\x93NUMPY", major, minor, header length (2 bytes in
// version 1.0, 4 bytes in 2.0 and 3.0, little-endian), then a Python dict
// literal with exactly 'descr', 'fortran_order' and 'shape', then the data.
#include "formats.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <charconv>
#include <cstring>
#include <filesystem>
#include <limits>
#include <system_error>

namespace meander::weights {

namespace {

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


}  // namespace

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

std::optional<TensorSet> read_npy_bytes(std::string_view bytes, const std::string& path, Diagnostics& diags,
                                        const WeightsLimit& limit) {
    if (!file_within_limit(bytes.size(), path, limit, diags)) return std::nullopt;
    std::string error;
    auto t = parse_npy(bytes, std::filesystem::path(path).stem().string(), error);
    if (!t) {
        diags.error(path, error);
        return std::nullopt;
    }
    TensorSet set;
    set.path = path;
    set.tensors.push_back(std::move(*t));
    return set;
}

}  // namespace meander::weights
