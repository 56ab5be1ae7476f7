// Actions of a streaming model's statements: state, and the gated or merge update.
#pragma once

#include <fmt/format.h>

#include "actions.hpp"
#include "naming.hpp"
#include "order.hpp"
#include "state.hpp"

namespace meander::parse_detail {

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
            d.transposed = s.transposed_given || s.model.tensors.transposed;  // both halves stored (in, 3H)
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
        d.transposed = s.transposed_given || s.model.tensors.transposed;
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

}  // namespace meander::parse_detail
