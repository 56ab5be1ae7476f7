// Statement order and placement: where a statement may come, and where a layer,
// a block, the evolution and the update of a streaming model go.
#pragma once

#include <string_view>

#include "state.hpp"

namespace meander::parse_detail {

// Every top-level statement but the model line: nothing may follow the output.
void top_level_statement(State& s, Loc stmt);

// A layer or block placed in the current body (or at the top level).
void placed(State& s, Loc stmt, std::string_view what);

// The continuous block a body statement (augment, solver, trained-with) belongs to, or null after an error.
Frame* continuous_frame(State& s, Loc stmt, std::string_view keyword);

// The evolution of a streaming model: right after 'state', before the update and the readout.
void place_evolution(State& s, Loc stmt, Block& b);

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

}  // namespace meander::parse_detail
