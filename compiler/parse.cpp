// Parse: description text -> Model. The grammar (grammar/meander.hpp) is the
// parser; the actions below only store what it matched. Errors: the control
// reports a must<> failure with its message from grammar/errors.hpp, then the
// nearest statement attempt catches it, the grammar's skip rules move on to
// the next statement, and parsing goes on, so one run reports several errors.
#include "parse.hpp"

#include <fmt/format.h>

#include <charconv>
#include <climits>
#include <string>
#include <type_traits>
#include <vector>

#include <tao/pegtl.hpp>

#include "../grammar/errors.hpp"
#include "../grammar/meander.hpp"

namespace meander {

namespace {

namespace pegtl = tao::pegtl;
namespace g = grammar;

// Blocks deeper than this are refused (each level costs parser stack).
constexpr std::size_t kMaxNesting = 32;
// Braced groups skipped after an error nest at most this deep; deeper '{' are skipped as plain characters.
constexpr int kMaxSkipNesting = 256;

// A block under construction and what its body has seen so far.
struct Frame {
    Block block;
    bool any_statement = false;
    Loc solver_loc;                 // line 0: no solver line yet
    Loc trained_loc;
    bool any_layer = false;         // a layer or block placed in the body
    int next_module = 0;            // the index the next layer takes in a numbered body
};

BodyTensors& body_tensors(Block& b) { return b.kind == Block::Kind::residual ? b.residual.tensors : b.continuous.tensors; }

struct State {
    const Source& src;
    Diagnostics& diags;
    Model model;

    // Top-level order: model, [weights], input, blocks, output.
    bool have_model = false;
    bool have_weights = false;
    std::string weights_key;        // of the weights statement just read
    Loc input_stmt;                 // line 0: not seen
    Loc output_stmt;
    bool have_blocks = false;
    bool reported_after_output = false;
    int layers_and_blocks = 0;      // placed so far, for kMaxLayersAndBlocks

    std::vector<Frame> open;        // blocks being built, innermost last
    int skip_depth = 0;
    // A '}' was missing where only the top level can go on (a top-level keyword or the
    // end): every enclosing block is unclosed too, so recovery resumes at the top level.
    bool abandon_blocks = false;

    // The statement being read.
    std::string name;
    Loc name_loc;
    int size = 0;
    std::string text;               // contents of the last string
    Loc text_loc;                   // its opening quote
    std::size_t string_open = 0;    // offset of the last opening quote
    Dense dense;
    bool act_given = false, weight_given = false, bias_given = false, from_given = false, no_bias_given = false;
    bool transposed_given = false, time_first_given = false;
    bool layout_transposed = false, layout_time_first = false;  // of the layout statement being read
    std::vector<std::string> ignore;  // patterns of the ignore statement being read
    std::vector<Loc> ignore_locs;
    std::string from;
    bool act_accepted = false;      // the activation just read was taken (not a second one)
    SolverSpec spec;
    double gap = 0.0;               // the largest gap of the state statement

    State(const Source& s, Diagnostics& d) : src(s), diags(d) {}

    void error(Loc loc, std::string message) { diags.error(src, loc, std::move(message)); }

    std::vector<Block>& body() {
        if (open.empty()) return model.blocks;
        Block& b = open.back().block;
        return b.kind == Block::Kind::residual ? b.residual.body : b.continuous.field;
    }

    // A streaming model's top-level statements, in order: state, evolution, update, readout.
    Loc stream_stmt;                // the evolution or update statement last placed
};

template <typename Input>
Loc loc_of(const Input& in, const State& s) {
    return s.src.loc_of(static_cast<std::size_t>(in.begin() - s.src.text.data()));
}

std::string_view kind_name(const Block& b) {
    if (b.kind == Block::Kind::continuous && b.continuous.blend) return "blend";
    return b.kind == Block::Kind::residual ? "residual" : "continuous";
}


Loc block_loc(const Block& b) {
    return b.kind == Block::Kind::residual ? b.residual.loc : b.continuous.loc;
}

// Sizes: decimal integers that fit an int.
template <typename Input>
int to_int(const Input& in, State& s) {
    int v = 0;
    auto [ptr, ec] = std::from_chars(in.begin(), in.end(), v);
    if (ec == std::errc::result_out_of_range || ptr != in.end()) {
        s.error(loc_of(in, s), fmt::format("integer {} is too large (at most {})", in.string_view(), INT_MAX));
        return 0;
    }
    return v;
}

// Reals: locale-free conversion; the grammar already fixed the spelling.
template <typename Input>
double to_real(const Input& in, State& s) {
    const char* first = in.begin();
    if (*first == '+') ++first;
    double v = 0.0;
    auto [ptr, ec] = std::from_chars(first, in.end(), v, std::chars_format::general);
    if (ec == std::errc::result_out_of_range || ec == std::errc::invalid_argument || ptr != in.end()) {
        s.error(loc_of(in, s), fmt::format("number {} is out of the range of a double", in.string_view()));
        return 0.0;
    }
    return v;
}

// Offset of the next token at or after `offset` (blanks and comments skipped),
// so a caret points at the offending character. At the end of the text the
// caret goes right after the last character that is not a blank.
std::size_t next_token(const Source& src, std::size_t offset) {
    pegtl::memory_input<> rest(src.text.data() + offset, src.text.data() + src.text.size(), "");
    (void)pegtl::parse<g::sep>(rest);
    std::size_t at = static_cast<std::size_t>(rest.current() - src.text.data());
    if (at == src.text.size()) {
        at = offset;
        while (at > 0 && (src.text[at - 1] == ' ' || src.text[at - 1] == '\t' || src.text[at - 1] == '\n' || src.text[at - 1] == '\r')) --at;
    }
    return at;
}

// ---- statement order --------------------------------------------------------

// Every top-level statement but the model line: nothing may follow the output.
void top_level_statement(State& s, Loc stmt) {
    if (s.output_stmt.line > 0 && !s.reported_after_output) {
        s.reported_after_output = true;
        s.error(stmt, fmt::format("this statement follows the 'output' statement of line {}; 'output' must be the last statement", s.output_stmt.line));
    }
}

// Thrown past kMaxLayersAndBlocks (already reported) to stop the parse.
struct TooManyBlocks {};

// A layer or block placed in the current body (or at the top level).
void placed(State& s, Loc stmt, std::string_view what) {
    if (++s.layers_and_blocks > kMaxLayersAndBlocks) {
        const std::string message = fmt::format("{} is beyond the limit of {} layers and blocks in a description; "
                                                "parsing stops here",
                                                what, kMaxLayersAndBlocks);
        s.error(stmt, message);
        throw TooManyBlocks{};
    }
    if (s.open.empty()) {
        top_level_statement(s, stmt);
        if (s.model.stream && s.model.stream->update == Stream::Update::none && !s.have_blocks)
            s.error(stmt, fmt::format("{} comes before the update of the streaming model; the readout follows the evolution and "
                                      "the update ('gated' or 'merge')",
                                      what));
        s.have_blocks = true;
        return;
    }
    Frame& f = s.open.back();
    if (f.block.kind == Block::Kind::continuous && (f.solver_loc.line > 0 || f.trained_loc.line > 0))
        s.error(stmt, fmt::format("{} comes after the solver line of continuous '{}'; the field's layers come first", what, f.block.continuous.name));
    f.any_statement = true;
    f.any_layer = true;
}

// The continuous block a body statement (augment, solver, trained-with) belongs to, or null after an error.
Frame* continuous_frame(State& s, Loc stmt, std::string_view keyword) {
    if (!s.open.empty() && s.open.back().block.kind == Block::Kind::continuous && s.open.back().block.continuous.blend) {
        s.error(stmt, fmt::format("'{}' is not allowed in blend '{}': the blend is a closed form and needs no solver", keyword,
                                  s.open.back().block.continuous.name));
        return nullptr;
    }
    if (s.open.empty() || s.open.back().block.kind != Block::Kind::continuous) {
        if (s.open.empty())
            s.error(stmt, fmt::format("'{}' is allowed only inside a continuous block", keyword));
        else
            s.error(stmt, fmt::format("'{}' is allowed only inside a continuous block, not in residual '{}'", keyword, s.open.back().block.residual.name));
        return nullptr;
    }
    return &s.open.back();
}

template <typename Input>
void push_block(const Input& in, State& s, Block::Kind kind) {
    if (s.open.size() >= kMaxNesting) {
        std::string message = fmt::format("blocks are nested more than {} deep", kMaxNesting);
        s.error(s.name_loc, message);
        throw pegtl::parse_error(message, in);
    }
    Frame f;
    f.block.kind = kind;
    if (kind == Block::Kind::residual) {
        f.block.residual.name = s.name;
        f.block.residual.loc = s.name_loc;
    } else {
        f.block.continuous.name = s.name;
        f.block.continuous.loc = s.name_loc;
    }
    s.open.push_back(std::move(f));
}

// The evolution of a streaming model: right after 'state', before the update and the readout.
void place_evolution(State& s, Loc stmt, Block& b) {
    top_level_statement(s, stmt);
    Continuous& c = b.continuous;
    const std::string what = fmt::format("{} '{}'", kind_name(b), c.name);
    if (!s.model.stream) {
        s.error(stmt, fmt::format("{} evolves over the gap between observations, which needs a 'state' statement before it "
                                  "(a streaming model)",
                                  what));
        return;
    }
    Stream& st = *s.model.stream;
    if (st.has_evolve) {
        s.error(stmt, fmt::format("{} is a second evolution; streaming model '{}' already evolves by {} '{}' (line {})", what,
                                  s.model.name, st.evolve.blend ? "blend" : "continuous",
                                  st.evolve.name, st.evolve.loc.line));
        return;
    }
    if (st.update != Stream::Update::none || s.have_blocks) {
        s.error(stmt, fmt::format("{} must come right after the 'state' statement, before the update and the readout", what));
        return;
    }
    st.has_evolve = true;
    st.evolve = std::move(c);
}

template <typename Input>
void pop_block(const Input& in, State& s) {
    Frame f = std::move(s.open.back());
    s.open.pop_back();
    if (s.open.empty() && f.block.kind == Block::Kind::continuous && (f.block.continuous.over_gap || f.block.continuous.blend)) {
        place_evolution(s, loc_of(in, s), f.block);
        return;
    }
    placed(s, loc_of(in, s), fmt::format("{} '{}'", kind_name(f.block), block_name(f.block)));
    if (!s.open.empty()) ++s.open.back().next_module;  // a nested block is one module of a numbered body
    s.body().push_back(std::move(f.block));
}

// ---- solver options ---------------------------------------------------------

bool first_time(State& s, Loc loc, std::string_view key) {
    for (const auto& k : s.spec.written)
        if (k == key) {
            s.error(loc, fmt::format("solver option '{}' is given twice", key));
            return false;
        }
    s.spec.written.emplace_back(key);
    return true;
}

template <typename Input>
void real_option(const Input& in, State& s, std::string_view key, double SolverSpec::*field) {
    double v = to_real(in, s);
    if (first_time(s, loc_of(in, s), key)) s.spec.*field = v;
}

template <typename Input>
void int_option(const Input& in, State& s, std::string_view key, int SolverSpec::*field) {
    int v = to_int(in, s);
    if (first_time(s, loc_of(in, s), key)) s.spec.*field = v;
}

template <typename Input>
void solver_done(const Input& in, State& s, bool trained) {
    std::string_view keyword = trained ? "trained-with" : "solver";
    Loc stmt = loc_of(in, s);
    Frame* f = continuous_frame(s, stmt, keyword);
    if (!f) return;
    Loc& seen = trained ? f->trained_loc : f->solver_loc;
    if (seen.line > 0) {
        s.error(stmt, fmt::format("continuous '{}' already has a {} line (line {})", f->block.continuous.name, keyword, seen.line));
        return;
    }
    seen = stmt;
    f->any_statement = true;
    if (trained)
        f->block.continuous.trained = s.spec;
    else
        f->block.continuous.solver = s.spec;
}

// ---- actions ------------------------------------------------------------------

template <typename Rule>
struct action : pegtl::nothing<Rule> {};

// Names of every kind go through one register; the statement's action commits them.
struct name_action {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.name = in.string();
        s.name_loc = loc_of(in, s);
    }
};
template <> struct action<g::model_name> : name_action {};
template <> struct action<g::input_name> : name_action {};
template <> struct action<g::output_name> : name_action {};

struct size_action {
    template <typename Input>
    static void apply(const Input& in, State& s) { s.size = to_int(in, s); }
};
template <> struct action<g::input_size> : size_action {};
template <> struct action<g::output_size> : size_action {};

template <> struct action<g::string_open> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.string_open = static_cast<std::size_t>(in.begin() - s.src.text.data());
        s.text_loc = loc_of(in, s);
    }
};

// String contents, with the escapes \" \\ \n read (the grammar admits no
// others); an empty string names nothing.
struct text_action {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.text.clear();
        const std::string_view raw(in.begin(), in.size());
        for (std::size_t i = 0; i < raw.size(); ++i) {
            if (raw[i] == '\\' && i + 1 < raw.size()) {
                ++i;
                s.text += raw[i] == 'n' ? '\n' : raw[i];
            } else {
                s.text += raw[i];
            }
        }
        if (s.text.empty()) s.error(s.text_loc, "empty string: a path or tensor name is needed here");
    }
};
template <> struct action<g::weights_path_text> : text_action {};
template <> struct action<g::weights_key_text> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.weights_key = in.string();
        if (s.weights_key.empty()) s.error(loc_of(in, s), "empty string: a key path is needed here");
    }
};

template <> struct action<g::kw_ignore> {
    template <typename Input>
    static void apply(const Input&, State& s) {
        s.ignore.clear();
        s.ignore_locs.clear();
    }
};
template <> struct action<g::ignore_pattern_text> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        text_action::apply(in, s);
        s.ignore.push_back(s.text);
        s.ignore_locs.push_back(s.text_loc);
    }
};
template <> struct action<g::ignore_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        Loc stmt = loc_of(in, s);
        top_level_statement(s, stmt);
        if (!s.model.ignore.empty()) {
            s.error(stmt, fmt::format("a second 'ignore' statement (the first is on line {}); list every pattern in one",
                                      s.model.ignore_locs.front().line));
            return;
        }
        if (!s.have_weights)
            s.error(stmt, "'ignore' names tensors of the weights file: it comes after the 'weights' statement");
        else if (s.input_stmt.line > 0 || s.have_blocks)
            s.error(stmt, "'ignore' must come before 'input' and the layers");
        s.model.ignore = s.ignore;
        s.model.ignore_locs = s.ignore_locs;
    }
};

template <> struct action<g::model_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        if (s.have_model) {
            s.error(loc_of(in, s), fmt::format("a second 'model' statement; this description already describes model '{}'", s.model.name));
            return;
        }
        s.have_model = true;
        s.model.name = s.name;
        s.model.loc = s.name_loc;
    }
};

template <> struct action<g::weights_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        Loc stmt = loc_of(in, s);
        top_level_statement(s, stmt);
        if (s.have_weights) {
            s.error(stmt, fmt::format("a second 'weights' statement (the first is on line {})", s.model.weights_loc.line));
            return;
        }
        if (s.input_stmt.line > 0 || s.have_blocks)
            s.error(stmt, "'weights' must come before 'input' and the layers");
        s.have_weights = true;
        s.model.weights_path = s.text;
        s.model.weights_loc = s.text_loc;
        s.model.weights_key = s.weights_key;
    }
};

template <> struct action<g::input_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        Loc stmt = loc_of(in, s);
        top_level_statement(s, stmt);
        if (s.input_stmt.line > 0) {
            s.error(stmt, fmt::format("a second 'input' statement (the first is on line {})", s.input_stmt.line));
            return;
        }
        if (s.have_blocks) s.error(stmt, "'input' must come before the first layer or block");
        s.input_stmt = stmt;
        s.model.input_name = s.name;
        s.model.input_loc = s.name_loc;
        s.model.input_size = s.size;
    }
};

template <> struct action<g::output_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        Loc stmt = loc_of(in, s);
        if (s.output_stmt.line > 0) {
            s.error(stmt, fmt::format("a second 'output' statement (the first is on line {})", s.output_stmt.line));
            s.reported_after_output = true;
            return;
        }
        top_level_statement(s, stmt);
        s.output_stmt = stmt;
        s.model.output_name = s.name;
        s.model.output_loc = s.name_loc;
        s.model.output_size = s.size;
    }
};

// Dense layers
template <> struct action<g::layer_name> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.dense = Dense{};
        s.dense.name = in.string();
        s.dense.loc = loc_of(in, s);
        s.act_given = s.weight_given = s.bias_given = s.from_given = s.no_bias_given = false;
        s.transposed_given = s.time_first_given = false;
        s.from.clear();
    }
};
template <> struct action<g::in_width> {
    template <typename Input>
    static void apply(const Input& in, State& s) { s.dense.in = to_int(in, s); }
};
template <> struct action<g::out_width> {
    template <typename Input>
    static void apply(const Input& in, State& s) { s.dense.out = to_int(in, s); }
};
template <> struct action<g::time_input> {
    template <typename Input>
    static void apply(const Input&, State& s) { s.dense.time_input = true; }
};
template <> struct action<g::activation_name> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.act_accepted = !s.act_given;
        if (s.act_given) {
            s.error(loc_of(in, s), fmt::format("layer '{}' has a second activation", s.dense.name));
            return;
        }
        s.act_given = true;
        s.dense.act = activation_from_name(in.string_view()).value_or(Activation::identity);
        // Published defaults: leaky-relu slope 0.01 (PyTorch LeakyReLU), elu alpha 1 (Clevert et al. 2016).
        s.dense.act_param = s.dense.act == Activation::leaky_relu ? 0.01 : s.dense.act == Activation::elu ? 1.0 : 0.0;
    }
};
template <> struct action<g::activation_param> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        double v = to_real(in, s);
        if (!s.act_accepted) return;
        if (s.dense.act != Activation::leaky_relu && s.dense.act != Activation::elu) {
            s.error(loc_of(in, s), fmt::format("activation '{}' takes no parameter (only leaky-relu and elu do)", activation_name(s.dense.act)));
            return;
        }
        s.dense.act_param = v;
    }
};

// The three tensor-name options: a flag, the option's own spelling, and where the name goes.
template <typename Input>
void tensor_option(const Input& in, State& s, bool& given, std::string_view option, std::string& target) {
    text_action::apply(in, s);
    if (given) {
        s.error(s.text_loc, fmt::format("'{}' is given twice for layer '{}'", option, s.dense.name));
        return;
    }
    given = true;
    target = s.text;
}
template <> struct action<g::weight_tensor_text> {
    template <typename Input>
    static void apply(const Input& in, State& s) { tensor_option(in, s, s.weight_given, "weight", s.dense.weight_tensor); }
};
template <> struct action<g::bias_tensor_text> {
    template <typename Input>
    static void apply(const Input& in, State& s) { tensor_option(in, s, s.bias_given, "bias", s.dense.bias_tensor); }
};
template <> struct action<g::from_prefix_text> {
    template <typename Input>
    static void apply(const Input& in, State& s) { tensor_option(in, s, s.from_given, "from", s.from); }
};
template <> struct action<g::no_bias_option> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        if (s.no_bias_given) s.error(loc_of(in, s), fmt::format("'no-bias' is given twice for layer '{}'", s.dense.name));
        s.no_bias_given = true;
    }
};
template <> struct action<g::transposed_option> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        if (s.transposed_given) s.error(loc_of(in, s), fmt::format("'transposed' is given twice for layer '{}'", s.dense.name));
        s.transposed_given = true;
    }
};
template <> struct action<g::time_first_option> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        if (s.time_first_given) s.error(loc_of(in, s), fmt::format("'time-first' is given twice for layer '{}'", s.dense.name));
        else if (!s.dense.time_input)
            s.error(loc_of(in, s), fmt::format("layer '{}' has no time column: 'time-first' applies to a layer with '+ t'", s.dense.name));
        s.time_first_given = true;
    }
};

// The tensor names of the layer just read, from its options.
void resolve_tensors(State& s) {
    Dense& d = s.dense;
    if (s.from_given && s.weight_given)
        s.error(d.loc, fmt::format("layer '{}' names its weight tensor twice ('from' and 'weight')", d.name));
    if (s.from_given && s.bias_given)
        s.error(d.loc, fmt::format("layer '{}' names its bias tensor twice ('from' and 'bias')", d.name));
    if (s.no_bias_given && s.bias_given)
        s.error(d.loc, fmt::format("layer '{}' has both 'bias' and 'no-bias'", d.name));
    if (d.tensor_prefix.empty()) d.tensor_prefix = d.name;
    const std::string& prefix = s.from_given ? s.from : d.tensor_prefix;
    if (!s.weight_given) d.weight_tensor = prefix + ".weight";
    if (!s.bias_given) d.bias_tensor = prefix + ".bias";
    if (s.no_bias_given) {
        d.has_bias = false;
        d.bias_tensor.clear();
    }
}

// The layer's place in its body: its default tensor prefix in a numbered body, and the
// layouts of the blocks around it.
void body_naming(State& s) {
    Dense& d = s.dense;
    d.transposed = s.transposed_given;
    d.time_first = s.time_first_given;
    for (Frame& f : s.open) {
        const BodyTensors& t = body_tensors(f.block);
        d.transposed = d.transposed || t.transposed;
        d.time_first = d.time_first || (t.time_first && d.time_input);
    }
    if (s.open.empty()) return;
    Frame& f = s.open.back();
    const BodyTensors& t = body_tensors(f.block);
    if (!t.numbered.empty()) d.tensor_prefix = fmt::format("{}.{}", t.numbered, f.next_module);
    // The affine map is one module; an activation is a parameter-free module of its own.
    f.next_module += d.act == Activation::identity ? 1 : 2;
}

template <> struct action<g::dense_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        body_naming(s);
        resolve_tensors(s);
        Dense& d = s.dense;
        placed(s, loc_of(in, s), fmt::format("layer '{}'", d.name));
        s.body().push_back(Block{Block::Kind::dense, std::move(d), {}, {}});
    }
};

// Streaming models
template <> struct action<g::state_name> : name_action {};
template <> struct action<g::state_size> : size_action {};
template <> struct action<g::gap_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.text_loc = loc_of(in, s);
        s.gap = to_real(in, s);
    }
};
template <> struct action<g::state_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        Loc stmt = loc_of(in, s);
        top_level_statement(s, stmt);
        if (s.model.stream) {
            s.error(stmt, fmt::format("a second 'state' statement (the first is on line {})", s.model.stream->loc.line));
            return;
        }
        if (s.input_stmt.line == 0) s.error(stmt, "'state' must come after 'input'");
        else if (s.have_blocks) s.error(stmt, "'state' must come before the first layer or block");
        Stream st;
        st.loc = stmt;
        st.state_name = s.name;
        st.state_loc = s.name_loc;
        st.state_size = s.size;
        st.largest_gap = s.gap;
        st.gap_loc = s.text_loc;
        s.model.stream = std::move(st);
    }
};

// The update of a streaming model: after the evolution, before the readout.
template <typename Input>
Stream* place_update(const Input& in, State& s, std::string_view keyword) {
    Loc stmt = loc_of(in, s);
    top_level_statement(s, stmt);
    if (!s.model.stream) {
        s.error(stmt, fmt::format("'{}' updates the state of a streaming model; it needs a 'state' statement before it", keyword));
        return nullptr;
    }
    Stream& st = *s.model.stream;
    if (st.update != Stream::Update::none) {
        s.error(stmt, fmt::format("a second update; streaming model '{}' is already updated by '{}' (line {})", s.model.name,
                                  st.update_name, st.update_loc.line));
        return nullptr;
    }
    if (s.have_blocks) {
        s.error(stmt, fmt::format("'{}' must come before the readout's layers", keyword));
        return nullptr;
    }
    if (!st.has_evolve) {
        s.error(stmt, fmt::format("'{}' comes before the evolution; a streaming model evolves over the gap first (a continuous "
                                  "block over [0, gap] or a blend), then updates",
                                  keyword));
        return nullptr;
    }
    st.update_name = s.dense.name;
    st.update_loc = s.dense.loc;
    return &st;
}

template <> struct action<g::obs_width> {
    template <typename Input>
    static void apply(const Input& in, State& s) { s.size = to_int(in, s); }
};
template <> struct action<g::gated_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        Stream* st = place_update(in, s, "gated");
        if (!st) return;
        st->update = Stream::Update::gated;
        st->update_in = s.dense.in;
        st->update_out = s.dense.out;
        // PyTorch GRUCell's tensors: weight_ih (3H, in), weight_hh (3H, H), bias_ih, bias_hh.
        const std::string prefix = s.from_given ? s.from : s.dense.name;
        auto half = [&](std::string_view part, int in_width) {
            Dense d;
            d.name = s.dense.name;
            d.loc = s.dense.loc;
            d.in = in_width;
            d.out = s.dense.out > 0 && s.dense.out <= (1 << 20) ? 3 * s.dense.out : 0;
            d.weight_tensor = fmt::format("{}.weight_{}", prefix, part);
            d.bias_tensor = fmt::format("{}.bias_{}", prefix, part);
            return Block{Block::Kind::dense, std::move(d), {}, {}};
        };
        st->update_layers.push_back(half("ih", s.dense.in));
        st->update_layers.push_back(half("hh", s.dense.out));
    }
};
template <> struct action<g::merge_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        Dense& d = s.dense;
        const int state_width = d.in;
        d.in = state_width > 0 && s.size > 0 && state_width <= (1 << 20) && s.size <= (1 << 20) ? state_width + s.size : 0;
        d.transposed = s.transposed_given;
        resolve_tensors(s);
        Stream* st = place_update(in, s, "merge");
        if (!st) return;
        st->update = Stream::Update::merge;
        st->update_in = state_width;
        st->update_obs = s.size;
        st->update_out = d.out;
        st->update_layers.push_back(Block{Block::Kind::dense, std::move(d), {}, {}});
    }
};

// Blocks
template <> struct action<g::residual_name> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        name_action::apply(in, s);
        push_block(in, s, Block::Kind::residual);
    }
};
template <> struct action<g::continuous_name> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        name_action::apply(in, s);
        push_block(in, s, Block::Kind::continuous);
    }
};
template <> struct action<g::block_width> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        Block& b = s.open.back().block;
        (b.kind == Block::Kind::residual ? b.residual.width : b.continuous.width) = to_int(in, s);
    }
};
template <> struct action<g::t0_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { s.open.back().block.continuous.t0 = to_real(in, s); }
};
template <> struct action<g::t1_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { s.open.back().block.continuous.t1 = to_real(in, s); }
};
template <> struct action<g::gap_end> {
    template <typename Input>
    static void apply(const Input&, State& s) { s.open.back().block.continuous.over_gap = true; }
};
template <> struct action<g::interval> {
    template <typename Input>
    static void apply(const Input& in, State& s) { s.open.back().block.continuous.interval_loc = loc_of(in, s); }
};
template <> struct action<g::blend_name> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        name_action::apply(in, s);
        push_block(in, s, Block::Kind::continuous);
        s.open.back().block.continuous.blend = true;
    }
};
template <> struct action<g::blend_block> {
    template <typename Input>
    static void apply(const Input& in, State& s) { pop_block(in, s); }
};
template <> struct action<g::residual_block> {
    template <typename Input>
    static void apply(const Input& in, State& s) { pop_block(in, s); }
};
template <> struct action<g::continuous_block> {
    template <typename Input>
    static void apply(const Input& in, State& s) { pop_block(in, s); }
};

template <> struct action<g::augment_size> : size_action {};
template <> struct action<g::augment_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        Loc stmt = loc_of(in, s);
        Frame* f = continuous_frame(s, stmt, "augment");
        if (!f) return;
        if (f->any_statement) {
            s.error(stmt, fmt::format("'augment' must be the first statement of continuous '{}'", f->block.continuous.name));
            return;
        }
        f->any_statement = true;
        f->block.continuous.augment = s.size;
    }
};

// How a block's layers name and lay out their tensors: statements before the block's layers.
Frame* naming_frame(State& s, Loc stmt, std::string_view keyword) {
    if (s.open.empty()) {
        s.error(stmt, fmt::format("'{}' is allowed only inside a residual or continuous block (it applies to the block's layers)",
                                  keyword));
        return nullptr;
    }
    Frame& f = s.open.back();
    if (f.any_layer) {
        s.error(stmt, fmt::format("'{}' must come before the layers of {} '{}'", keyword, kind_name(f.block), block_name(f.block)));
        return nullptr;
    }
    f.any_statement = true;
    return &f;
}
template <> struct action<g::numbered_prefix_text> : text_action {};
template <> struct action<g::numbered_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        Loc stmt = loc_of(in, s);
        Frame* f = naming_frame(s, stmt, "numbered");
        if (!f) return;
        BodyTensors& t = body_tensors(f->block);
        if (!t.numbered.empty()) {
            s.error(stmt, fmt::format("{} '{}' already has a 'numbered' statement (line {})", kind_name(f->block),
                                      block_name(f->block), t.numbered_loc.line));
            return;
        }
        t.numbered = s.text;
        t.numbered_loc = stmt;
    }
};
template <> struct action<g::kw_layout> {
    template <typename Input>
    static void apply(const Input&, State& s) { s.layout_transposed = s.layout_time_first = false; }
};
template <> struct action<g::layout_transposed> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        if (s.layout_transposed) s.error(loc_of(in, s), "'transposed' is given twice in the layout statement");
        s.layout_transposed = true;
    }
};
template <> struct action<g::layout_time_first> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        if (s.layout_time_first) s.error(loc_of(in, s), "'time-first' is given twice in the layout statement");
        s.layout_time_first = true;
    }
};
template <> struct action<g::layout_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        Loc stmt = loc_of(in, s);
        Frame* f = naming_frame(s, stmt, "layout");
        if (!f) return;
        BodyTensors& t = body_tensors(f->block);
        if (t.layout_loc.line > 0) {
            s.error(stmt, fmt::format("{} '{}' already has a 'layout' statement (line {})", kind_name(f->block),
                                      block_name(f->block), t.layout_loc.line));
            return;
        }
        t.transposed = s.layout_transposed;
        t.time_first = s.layout_time_first;
        t.layout_loc = stmt;
    }
};

// Solver lines
template <> struct action<g::kw_solver> {
    template <typename Input>
    static void apply(const Input&, State& s) { s.spec = SolverSpec{}; }
};
template <> struct action<g::kw_trained_with> : action<g::kw_solver> {};
template <> struct action<g::solver_method> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.spec.method = in.string();
        s.spec.loc = loc_of(in, s);
    }
};
template <> struct action<g::steps_per_unit_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "steps-per-unit", &SolverSpec::steps_per_unit); }
};
template <> struct action<g::steps_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { int_option(in, s, "steps", &SolverSpec::steps); }
};
template <> struct action<g::max_steps_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { int_option(in, s, "max-steps", &SolverSpec::max_steps); }
};
template <> struct action<g::rtol_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "rtol", &SolverSpec::rtol); }
};
template <> struct action<g::atol_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "atol", &SolverSpec::atol); }
};
template <> struct action<g::first_step_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "first-step", &SolverSpec::first_step); }
};
template <> struct action<g::safety_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "safety", &SolverSpec::safety); }
};
template <> struct action<g::min_factor_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "min-factor", &SolverSpec::min_factor); }
};
template <> struct action<g::max_factor_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "max-factor", &SolverSpec::max_factor); }
};
template <> struct action<g::pi_alpha_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "pi-alpha", &SolverSpec::pi_alpha); }
};
template <> struct action<g::pi_beta_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "pi-beta", &SolverSpec::pi_beta); }
};
template <> struct action<g::controller_kind> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        if (first_time(s, loc_of(in, s), "controller"))
            s.spec.controller = in.string_view() == "pi" ? Controller::pi : Controller::integral;
    }
};
template <> struct action<g::solver_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) { solver_done(in, s, false); }
};
template <> struct action<g::trained_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) { solver_done(in, s, true); }
};

// ---- control: messages at must<> points, recovery at statement attempts -------

template <typename Rule>
struct control : pegtl::normal<Rule> {
    template <typename ParseInput>
    [[noreturn]] static void raise(const ParseInput& in, State& s) {
        static_assert(g::error_message<Rule> != nullptr, "a must<> point without a message in grammar/errors.hpp");
        std::size_t at = next_token(s.src, static_cast<std::size_t>(in.current() - s.src.text.data()));
        std::string message = g::error_message<Rule>;
        if constexpr (std::is_same_v<Rule, g::string_close>) at = s.string_open;
        if constexpr (std::is_same_v<Rule, g::string_escape_char>)  // at the backslash
            at = static_cast<std::size_t>(in.current() - s.src.text.data()) - 1;
        if constexpr (std::is_same_v<Rule, g::close_brace>) {
            s.abandon_blocks = true;
            if (!s.open.empty()) {
                const Block& b = s.open.back().block;
                message = fmt::format(g::unclosed_block, kind_name(b), block_name(b), block_loc(b).line);
            }
        }
        s.error(s.src.loc_of(at), message);
        throw pegtl::parse_error(message, in);
    }

    template <pegtl::apply_mode A, pegtl::rewind_mode M, template <typename...> class Action,
              template <typename...> class Control, typename ParseInput>
    [[nodiscard]] static bool match(ParseInput& in, State& s) {
        if constexpr (std::is_same_v<Rule, g::top_attempt> || std::is_same_v<Rule, g::body_attempt>) {
            // The error is already reported; forget the half-built statement and let the skip rule
            // that follows in the grammar resume from the statement's first token.
            const std::size_t depth = s.open.size();
            auto marker = in.template mark<pegtl::rewind_mode::required>();
            try {
                return marker(pegtl::normal<Rule>::template match<A, pegtl::rewind_mode::active, Action, Control>(in, s));
            } catch (const pegtl::parse_error&) {
                if constexpr (std::is_same_v<Rule, g::body_attempt>) {
                    if (s.abandon_blocks) throw;
                }
                s.abandon_blocks = false;
                s.open.erase(s.open.begin() + static_cast<std::ptrdiff_t>(depth), s.open.end());
                return false;
            }
        } else if constexpr (std::is_same_v<Rule, g::skip_group>) {
            if (s.skip_depth >= kMaxSkipNesting) return false;
            ++s.skip_depth;
            bool r = false;
            try {
                r = pegtl::normal<Rule>::template match<A, M, Action, Control>(in, s);
            } catch (...) {
                --s.skip_depth;
                throw;
            }
            --s.skip_depth;
            return r;
        } else {
            return pegtl::normal<Rule>::template match<A, M, Action, Control>(in, s);
        }
    }
};

}  // namespace

std::optional<Model> parse_description(const Source& src, Diagnostics& diags) {
    const int errors_before = diags.error_count();
    if (src.text.size() > kMaxDescriptionBytes) {
        diags.error(src.path, fmt::format("the description is {} bytes long; at most {} (8 MiB) are read",
                                          src.text.size(), kMaxDescriptionBytes));
        return std::nullopt;
    }
    State s(src, diags);
    pegtl::memory_input<> in(src.text.data(), src.text.data() + src.text.size(), src.path);
    try {
        (void)pegtl::parse<g::description, action, control>(in, s);
    } catch (const pegtl::parse_error&) {
        // Already reported by the control (a missing model line cannot be skipped).
        return std::nullopt;
    } catch (const TooManyBlocks&) {
        return std::nullopt;
    }
    if (diags.error_count() != errors_before) return std::nullopt;
    // Missing statements are reported only for an otherwise clean description: after a
    // syntax error the skipped text may have held them.
    Loc end = src.loc_of(next_token(src, src.text.size()));
    if (s.input_stmt.line == 0) diags.error(src, end, "missing 'input NAME[N]' statement (it comes after 'model' and 'weights')");
    if (s.output_stmt.line == 0) diags.error(src, end, "missing 'output NAME[N]' statement at the end of the description");
    if (s.model.stream && !s.model.stream->has_evolve)
        diags.error(src, s.model.stream->loc, fmt::format("streaming model '{}' has no evolution: after 'state', a continuous block "
                                                          "over [0, gap] or a blend",
                                                          s.model.name));
    else if (s.model.stream && s.model.stream->update == Stream::Update::none)
        diags.error(src, s.model.stream->loc, fmt::format("streaming model '{}' has no update: after the evolution, a 'gated' or "
                                                          "'merge' layer",
                                                          s.model.name));
    if (diags.error_count() != errors_before) return std::nullopt;
    return std::move(s.model);
}

}  // namespace meander
