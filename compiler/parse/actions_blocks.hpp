// Actions of residual, continuous and blend blocks and their body statements
// (augment, numbered, layout).
#pragma once

#include <fmt/format.h>

#include "actions.hpp"
#include "naming.hpp"
#include "order.hpp"
#include "state.hpp"

namespace meander::parse_detail {

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
        if (s.open.empty()) {
            // Model-wide: every layer of the model, the streaming parts' too.
            top_level_statement(s, stmt);
            BodyTensors& t = s.model.tensors;
            if (t.layout_loc.line > 0) {
                s.error(stmt, fmt::format("model '{}' already has a 'layout' statement (line {})", s.model.name,
                                          t.layout_loc.line));
                return;
            }
            if (s.have_blocks || s.model.stream) {
                s.error(stmt, "a model-wide 'layout' must come before the 'state' statement and the first layer or block");
                return;
            }
            t.transposed = s.layout_transposed;
            t.time_first = s.layout_time_first;
            t.layout_loc = stmt;
            return;
        }
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

}  // namespace meander::parse_detail
