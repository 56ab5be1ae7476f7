// The weight listing (.mnw): DEVELOPERS.md "Weight listing (.mnw)" describes
// it. Reading and writing.
#include "formats.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <charconv>
#include <system_error>

namespace meander::weights {

namespace {

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

}  // namespace

std::optional<TensorSet> read_listing_bytes(std::string text, const std::string& path, Diagnostics& diags,
                                            const WeightsLimit& limit) {
    if (!file_within_limit(text.size(), path, limit, diags)) return std::nullopt;
    ListingReader reader(path, std::move(text), diags);
    return reader.read();
}

}  // namespace meander::weights

namespace meander {

using namespace weights;

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

}  // namespace meander
