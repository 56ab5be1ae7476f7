// Format: the canonical layout of a description. The values come from the
// parsed Model; a second pass of the same grammar records where each
// statement and comment sits, so comments keep their place: an own-line
// comment stays before the statement that follows it, a trailing comment
// stays on its statement's line. Runs of blank lines become one; none
// directly inside braces.
#include "format.hpp"

#include "../runtime/tableau.hpp"

#include <fmt/format.h>

#include <limits>
#include <map>
#include <string>
#include <vector>

#include <tao/pegtl.hpp>

#include "../grammar/meander.hpp"
#include "parse.hpp"

namespace meander {

std::string format_number(double v) {
    // fmt gives the shortest round-trip digits ("1e-06", "0.0001"); descriptions write the
    // exponent plainly ("1e-6"), and a small number in exponent form when that is shorter ("1e-4").
    std::string s = fmt::format("{}", v);
    const std::size_t e = s.find('e');
    if (e != std::string::npos) {
        std::string mantissa = s.substr(0, e + 1);
        std::size_t i = e + 1;
        if (s[i] == '-') mantissa += '-';
        if (s[i] == '+' || s[i] == '-') ++i;
        while (i + 1 < s.size() && s[i] == '0') ++i;
        return mantissa + s.substr(i);
    }
    const std::size_t sign = s[0] == '-' ? 1 : 0;
    if (s.compare(sign, 2, "0.") != 0) return s;
    std::size_t first = sign + 2;
    while (first < s.size() && s[first] == '0') ++first;
    if (first == s.size()) return s;
    const std::string digits = s.substr(first);
    std::string exp_form = s.substr(0, sign) + digits.substr(0, 1) + (digits.size() > 1 ? "." + digits.substr(1) : "") +
                           fmt::format("e-{}", first - sign - 1);
    return exp_form.size() < s.size() ? exp_form : s;
}

std::string format_solver(const SolverSpec& spec) {
    // The canonical order of the options: the fixed-step budget, then tolerances, budget, step-size control.
    std::string out = spec.method;
    auto has = [&](std::string_view key) {
        for (const auto& k : spec.written)
            if (k == key) return true;
        return false;
    };
    auto real = [&](std::string_view key, double v) {
        if (has(key)) out += fmt::format(", {} {}", key, format_number(v));
    };
    auto integer = [&](std::string_view key, int v) {
        if (has(key)) out += fmt::format(", {} {}", key, v);
    };
    integer("steps", spec.steps);
    real("steps-per-unit", spec.steps_per_unit);
    real("rtol", spec.rtol);
    real("atol", spec.atol);
    integer("max-steps", spec.max_steps);
    real("first-step", spec.first_step);
    // An adaptive solver's step-size control is spelled out in full, defaults
    // included, so a review sees every constant the deployed code will use.
    const Tableau* t = find_tableau(spec.method);
    const bool adaptive = t && t->adaptive();
    auto control = [&](std::string_view key, double v) {
        if (adaptive || has(key)) out += fmt::format(", {} {}", key, format_number(v));
    };
    if (adaptive || has("controller")) out += spec.controller == Controller::pi ? ", controller pi" : ", controller integral";
    control("safety", spec.safety);
    control("min-factor", spec.min_factor);
    control("max-factor", spec.max_factor);
    if (spec.controller == Controller::pi || has("pi-alpha")) control("pi-alpha", spec.pi_alpha);
    if (spec.controller == Controller::pi || has("pi-beta")) control("pi-beta", spec.pi_beta);
    return out;
}

namespace {

namespace pegtl = tao::pegtl;
namespace g = grammar;

enum class Kind { model, weights, ignore, learn, input, output, dense, augment, numbered, layout, storage, solver, trained, header, close, state, gated, merge };

struct Record {
    Kind kind;
    std::size_t begin, end;         // the statement's text, first to last token
};

struct Layout {
    std::vector<Record> records;
    std::map<std::size_t, std::string> comments;  // by offset; the map drops repeats from backtracking
    std::size_t header_begin = 0;
};

template <typename Rule>
struct layout_action : pegtl::nothing<Rule> {};

template <Kind K>
struct record_action {
    template <typename Input>
    static void apply(const Input& in, Layout& l) {
        l.records.push_back(Record{K, static_cast<std::size_t>(in.iterator().byte), static_cast<std::size_t>(in.iterator().byte + in.size())});
    }
};
template <> struct layout_action<g::model_line> : record_action<Kind::model> {};
template <> struct layout_action<g::weights_line> : record_action<Kind::weights> {};
template <> struct layout_action<g::input_line> : record_action<Kind::input> {};
template <> struct layout_action<g::output_line> : record_action<Kind::output> {};
template <> struct layout_action<g::dense_line> : record_action<Kind::dense> {};
template <> struct layout_action<g::augment_line> : record_action<Kind::augment> {};
template <> struct layout_action<g::ignore_line> : record_action<Kind::ignore> {};
template <> struct layout_action<g::learn_line> : record_action<Kind::learn> {};
template <> struct layout_action<g::numbered_line> : record_action<Kind::numbered> {};
template <> struct layout_action<g::layout_line> : record_action<Kind::layout> {};
template <> struct layout_action<g::storage_line> : record_action<Kind::storage> {};
template <> struct layout_action<g::solver_line> : record_action<Kind::solver> {};
template <> struct layout_action<g::trained_line> : record_action<Kind::trained> {};
template <> struct layout_action<g::close_brace> : record_action<Kind::close> {};
template <> struct layout_action<g::state_line> : record_action<Kind::state> {};
template <> struct layout_action<g::gated_line> : record_action<Kind::gated> {};
template <> struct layout_action<g::merge_line> : record_action<Kind::merge> {};

struct header_start {
    template <typename Input>
    static void apply(const Input& in, Layout& l) { l.header_begin = in.iterator().byte; }
};
template <> struct layout_action<g::kw_residual> : header_start {};
template <> struct layout_action<g::kw_continuous> : header_start {};
template <> struct layout_action<g::kw_blend> : header_start {};
template <> struct layout_action<g::open_brace> {
    template <typename Input>
    static void apply(const Input& in, Layout& l) {
        l.records.push_back(Record{Kind::header, l.header_begin, static_cast<std::size_t>(in.iterator().byte + 1)});
    }
};
template <> struct layout_action<g::comment> {
    template <typename Input>
    static void apply(const Input& in, Layout& l) {
        std::string text = in.string();
        while (!text.empty() && (text.back() == ' ' || text.back() == '\t' || text.back() == '\r')) text.pop_back();
        l.comments.emplace(in.iterator().byte, std::move(text));
    }
};

std::string quoted(const std::string& s) { return quote_string(s); }

// The options of an input or output statement, in the canonical order: names (or
// classes), then the standardisation.
std::string vector_options(const VectorInfo& info) {
    std::string out;
    if (!info.names.empty()) {
        out += ", names [";
        for (std::size_t i = 0; i < info.names.size(); ++i) {
            out += (i ? ", " : "") + info.names[i];
            if (i < info.units.size() && !info.units[i].empty()) out += " in " + quoted(info.units[i]);
        }
        out += "]";
    }
    if (!info.classes.empty()) {
        out += ", classes [";
        for (std::size_t i = 0; i < info.classes.size(); ++i) out += (i ? ", " : "") + info.classes[i];
        out += "]";
    }
    if (const auto& st = info.standardised) {
        auto part = [&](const std::string& tensor, const Eigen::VectorXd& v) {
            if (!tensor.empty()) return quoted(tensor);
            std::string list = "[";
            for (Eigen::Index i = 0; i < v.size(); ++i) list += (i ? ", " : "") + format_number(v[i]);
            return list + "]";
        };
        out += ", standardised mean " + part(st->mean_tensor, st->mean) + " scale " + part(st->scale_tensor, st->scale);
    }
    return out;
}

// A layer's options after its widths: activation, tensor names, layout (less what its
// blocks' layout statements already say).
std::string dense_options(const Dense& d, bool block_transposed = false, bool block_time_first = false);

std::string dense_text(const Dense& d, bool block_transposed, bool block_time_first) {
    return fmt::format("dense {}: {}{} -> {}", d.name, d.in, d.time_input ? " + t" : "", d.out) +
           dense_options(d, block_transposed, block_time_first);
}

std::string dense_options(const Dense& d, bool block_transposed, bool block_time_first) {
    std::string out;
    if (d.act != Activation::identity) {
        out += fmt::format(", {}", activation_name(d.act));
        if ((d.act == Activation::leaky_relu && d.act_param != 0.01) || (d.act == Activation::elu && d.act_param != 1.0))
            out += " " + format_number(d.act_param);
    }
    // Tensor names: the shortest spelling that gives the same names back.
    const std::string suffix = ".weight";
    const bool has_prefix = d.weight_tensor.size() > suffix.size() &&
                            d.weight_tensor.compare(d.weight_tensor.size() - suffix.size(), suffix.size(), suffix) == 0;
    const std::string prefix = has_prefix ? d.weight_tensor.substr(0, d.weight_tensor.size() - suffix.size()) : std::string();
    const std::string& own = d.tensor_prefix.empty() ? d.name : d.tensor_prefix;
    if (has_prefix && (!d.has_bias || d.bias_tensor == prefix + ".bias")) {
        if (prefix != own) out += ", from " + quoted(prefix);
    } else {
        if (d.weight_tensor != own + ".weight") out += ", weight " + quoted(d.weight_tensor);
        if (d.has_bias && d.bias_tensor != own + ".bias") out += ", bias " + quoted(d.bias_tensor);
    }
    if (!d.has_bias) out += ", no-bias";
    if (d.transposed && !block_transposed) out += ", transposed";
    if (d.time_first && !block_time_first) out += ", time-first";
    if (d.storage_asked) out += fmt::format(", weights-as {}", weight_storage_name(d.storage_asked->storage));
    return out;
}

// Walks the records in source order, taking each statement's values from the Model.
class Printer {
public:
    Printer(const Source& src, const Model& model, const Layout& layout) : src_(src), model_(model), layout_(layout) {
        comment_ = layout_.comments.begin();
        cursors_.push_back(Cursor{&model_.blocks, 0, nullptr, &model_.tensors, &model_.storage_asked});
    }

    std::string run() {
        const auto& recs = layout_.records;
        for (std::size_t i = 0; i < recs.size(); ++i) {
            const Record& r = recs[i];
            const int first = line_of(r.begin);
            const int last = line_of(r.end - 1);
            const int depth = static_cast<int>(cursors_.size()) - 1;
            // Comments before the statement, and inside it, go on their own lines before it;
            // the blank line before a statement, if any, goes before its inner comments.
            flush_comments(first, depth);
            bool blank = gap(first) && r.kind != Kind::close;
            while (comment_ != layout_.comments.end() && line_of(comment_->first) < last) {
                line(depth, comment_->second, blank);
                blank = false;
                ++comment_;
            }
            std::string text = statement(r);
            line(r.kind == Kind::close ? depth - 1 : depth, text, blank);
            // A comment after the statement's last token on its last line trails it, unless
            // another statement starts on that line before the comment.
            if (comment_ != layout_.comments.end() && line_of(comment_->first) == last && comment_->first >= r.end &&
                (i + 1 == recs.size() || recs[i + 1].begin > comment_->first)) {
                out_.pop_back();
                out_ += "  " + comment_->second + "\n";
                ++comment_;
            }
            prev_line_ = last;
            body_start_ = r.kind == Kind::header;
        }
        flush_comments(std::numeric_limits<int>::max(), 0);
        return out_;
    }

private:
    struct Cursor {
        const std::vector<Block>* body;
        std::size_t next;
        const Continuous* continuous;   // the block whose body this is, if continuous
        const BodyTensors* tensors = nullptr;  // the block's numbered and layout statements (none at the top)
        const std::optional<StorageChoice>* storage = nullptr;  // the block's weights-as statement (the model's at the top)
    };

    int line_of(std::size_t offset) const { return src_.loc_of(offset).line; }

    void flush_comments(int before_line, int depth) {
        while (comment_ != layout_.comments.end() && line_of(comment_->first) < before_line) {
            const int l = line_of(comment_->first);
            line(depth, comment_->second, gap(l));
            prev_line_ = l;
            body_start_ = false;
            ++comment_;
        }
    }

    // Whether the source has a blank line before `source_line` that the output keeps
    // (never at the start of the file, right after '{' or before '}').
    bool gap(int source_line) const { return !out_.empty() && !body_start_ && source_line - prev_line_ > 1; }

    void line(int depth, const std::string& text, bool blank) {
        if (blank) out_ += '\n';
        out_ += std::string(static_cast<std::size_t>(2 * depth), ' ');
        out_ += text;
        out_ += '\n';
    }

    std::string statement(const Record& r) {
        Cursor& c = cursors_.back();
        switch (r.kind) {
            case Kind::model: return "model " + model_.name;
            case Kind::weights: return "weights " + quoted(model_.weights_path) + (model_.weights_key.empty() ? "" : " under " + quoted(model_.weights_key));
            case Kind::ignore: {
                std::string out = "ignore";
                for (std::size_t i = 0; i < model_.ignore.size(); ++i) out += (i ? ", " : " ") + quoted(model_.ignore[i]);
                return out;
            }
            case Kind::learn: {
                const LearnSpec& l = *model_.learn;
                std::string out = "learn ";
                switch (l.what) {
                case LearnSpec::What::biases: out += "biases"; break;
                case LearnSpec::What::head: out += "head"; break;
                case LearnSpec::What::all: out += "all"; break;
                case LearnSpec::What::layers:
                    out += "layers";
                    for (std::size_t i = 0; i < l.layers.size(); ++i) out += (i ? ", " : " ") + l.layers[i];
                    break;
                }
                if (l.way_written) out += l.way == LearnSpec::Way::adjoint ? " by adjoint" : " by steps";
                return out;
            }
            case Kind::numbered: return "numbered " + quoted(c.tensors->numbered);
            case Kind::layout: {
                std::string out;
                if (c.tensors->transposed) out += ", transposed";
                if (c.tensors->time_first) out += ", time-first";
                return "layout " + out.substr(2);
            }
            case Kind::storage: return fmt::format("weights-as {}", weight_storage_name((*c.storage)->storage));
            case Kind::input:
                return fmt::format("input {}[{}]", model_.input_name, model_.input_size) + vector_options(model_.input_info);
            case Kind::output:
                return fmt::format("output {}[{}]", model_.output_name, model_.output_size) + vector_options(model_.output_info);
            case Kind::dense: {
                bool transposed = false, time_first = false;
                for (const Cursor& k : cursors_)
                    if (k.tensors) {
                        transposed = transposed || k.tensors->transposed;
                        time_first = time_first || k.tensors->time_first;
                    }
                const Dense& d = (*c.body)[c.next++].dense;
                return dense_text(d, transposed, time_first && d.time_input);
            }
            case Kind::augment: return fmt::format("augment {}", c.continuous->augment);
            case Kind::solver: return "solver " + format_solver(c.continuous->solver);
            case Kind::trained: return "trained-with " + format_solver(*c.continuous->trained);
            case Kind::state: {
                const Stream& st = *model_.stream;
                return fmt::format("state {}[{}], largest-gap {}", st.state_name, st.state_size, format_number(st.largest_gap));
            }
            case Kind::gated: {
                // The tensor prefix: "<prefix>.weight_ih".
                const Stream& st = *model_.stream;
                const std::string& w = st.update_layers.front().dense.weight_tensor;
                const std::string prefix = w.substr(0, w.size() - std::string_view(".weight_ih").size());
                const bool transposed = st.update_layers.front().dense.transposed && !model_.tensors.transposed;
                return fmt::format("gated {}: {} -> {}", st.update_name, st.update_in, st.update_out) +
                       (prefix == st.update_name ? "" : ", from " + quoted(prefix)) + (transposed ? ", transposed" : "");
            }
            case Kind::merge: {
                const Stream& st = *model_.stream;
                const Dense& d = st.update_layers.front().dense;
                return fmt::format("merge {}: {} + {} -> {}", d.name, st.update_in, st.update_obs, d.out) +
                       dense_options(d, model_.tensors.transposed);
            }
            case Kind::header: {
                if (cursors_.size() == 1 && model_.stream && !evolve_done_) {
                    // A streaming model's first block is its evolution, kept apart from the readout.
                    evolve_done_ = true;
                    const Continuous& k = model_.stream->evolve;
                    cursors_.push_back(Cursor{&k.field, 0, &k, &k.tensors, &k.storage_asked});
                    if (k.blend) return fmt::format("blend {}: {} {{", k.name, k.width);
                    return fmt::format("continuous {}: {}, t in [{}, gap] {{", k.name, k.width, format_number(k.t0));
                }
                const Block& b = (*c.body)[c.next++];
                if (b.kind == Block::Kind::residual) {
                    cursors_.push_back(Cursor{&b.residual.body, 0, nullptr, &b.residual.tensors, &b.residual.storage_asked});
                    return fmt::format("residual {}: {} {{", b.residual.name, b.residual.width);
                }
                const Continuous& k = b.continuous;
                cursors_.push_back(Cursor{&k.field, 0, &k, &k.tensors, &k.storage_asked});
                return fmt::format("continuous {}: {}, t in [{}, {}] {{", k.name, k.width, format_number(k.t0), format_number(k.t1));
            }
            case Kind::close: cursors_.pop_back(); return "}";
        }
        return {};
    }

    const Source& src_;
    const Model& model_;
    const Layout& layout_;
    std::map<std::size_t, std::string>::const_iterator comment_;
    std::vector<Cursor> cursors_;
    std::string out_;
    int prev_line_ = 0;
    bool body_start_ = false;
    bool evolve_done_ = false;
};

}  // namespace

std::optional<std::string> format_description(const Source& src, Diagnostics& diags) {
    auto model = parse_description(src, diags);
    if (!model) return std::nullopt;
    // The description is valid, so this pass of the grammar meets no must<> failure.
    Layout layout;
    pegtl::memory_input<> in(src.text.data(), src.text.data() + src.text.size(), src.path);
    (void)pegtl::parse<g::description, layout_action>(in, layout);
    return Printer(src, *model, layout).run();
}

}  // namespace meander
