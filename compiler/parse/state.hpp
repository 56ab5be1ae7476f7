// The parse state shared by the actions, the helpers and the control: the block
// frames, the statement being read, and the conversions of matched text.
#pragma once

#include <fmt/format.h>

#include <charconv>
#include <climits>
#include <cstddef>
#include <string>
#include <string_view>
#include <vector>

#include <tao/pegtl.hpp>

#include "../../grammar/meander.hpp"
#include "../parse.hpp"

namespace meander::parse_detail {

namespace pegtl = tao::pegtl;
namespace g = grammar;

// Blocks deeper than this are refused (each level costs parser stack).
inline constexpr std::size_t kMaxNesting = 32;
// Braced groups skipped after an error nest at most this deep; deeper '{' are skipped as plain characters.
inline constexpr int kMaxSkipNesting = 256;

// A block under construction and what its body has seen so far.
struct Frame {
    Block block;
    bool any_statement = false;
    Loc solver_loc;                 // line 0: no solver line yet
    Loc trained_loc;
    bool any_layer = false;         // a layer or block placed in the body
    int next_module = 0;            // the index the next layer takes in a numbered body
};

BodyTensors& body_tensors(Block& b);

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
    bool storage_given = false;      // a weights-as option on the layer being read
    StorageChoice storage_read;      // the storage just read (statement or option)
    bool layout_transposed = false, layout_time_first = false;  // of the layout statement being read
    std::vector<std::string> ignore;  // patterns of the ignore statement being read
    std::vector<Loc> ignore_locs;
    LearnSpec learn;                  // the learn statement being read
    std::string from;
    bool act_accepted = false;      // the activation just read was taken (not a second one)
    SolverSpec spec;
    double gap = 0.0;               // the largest gap of the state statement
    VectorInfo vector;              // options of the input or output statement being read
    std::vector<double> values;     // a bracketed list of numbers being read, and where each is
    std::vector<Loc> value_locs;

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

std::string_view kind_name(const Block& b);

Loc block_loc(const Block& b);

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
std::size_t next_token(const Source& src, std::size_t offset);

// Thrown past kMaxLayersAndBlocks (already reported) to stop the parse.
struct TooManyBlocks {};

}  // namespace meander::parse_detail
