// Actions of weight storage: the `weights-as` statement (the model's, or a
// block's, before its layers) and a dense layer's `weights-as` option.
#pragma once

#include <fmt/format.h>

#include "actions.hpp"
#include "state.hpp"

namespace meander::parse_detail {

template <typename Input>
void read_storage(const Input& in, State& s) {
    s.storage_read = StorageChoice{weight_storage_from_name(in.string_view()).value_or(WeightStorage::real), loc_of(in, s)};
}

template <> struct action<g::storage_name> {
    template <typename Input>
    static void apply(const Input& in, State& s) { read_storage(in, s); }
};
template <> struct action<g::storage_line_name> {
    template <typename Input>
    static void apply(const Input& in, State& s) { read_storage(in, s); }
};

// A dense layer's option.
template <> struct action<g::storage_option> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        if (s.storage_given) {
            s.error(loc_of(in, s), fmt::format("'weights-as' is given twice for layer '{}'", s.dense.name));
            return;
        }
        s.storage_given = true;
        s.dense.storage_asked = s.storage_read;
    }
};

// The statement: at the top level before the first layer or block, the model's
// default; in a block before its layers, the default of the layers inside.
template <> struct action<g::storage_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        const Loc stmt = loc_of(in, s);
        std::optional<StorageChoice>* slot = nullptr;
        std::string where;
        if (s.open.empty()) {
            if (s.have_blocks) {
                s.error(stmt, "'weights-as' for the whole model must come before the first layer or block (a layer "
                              "takes its own with the option ', weights-as ...')");
                return;
            }
            slot = &s.model.storage_asked;
            where = fmt::format("model '{}'", s.model.name);
        } else {
            Frame& f = s.open.back();
            if (f.any_layer) {
                s.error(stmt, fmt::format("'weights-as' must come before the layers of {} '{}'", kind_name(f.block),
                                          block_name(f.block)));
                return;
            }
            slot = f.block.kind == Block::Kind::residual ? &f.block.residual.storage_asked : &f.block.continuous.storage_asked;
            where = fmt::format("{} '{}'", kind_name(f.block), block_name(f.block));
        }
        if (*slot) {
            s.error(stmt, fmt::format("{} already has a 'weights-as' statement (line {})", where, (*slot)->loc.line));
            return;
        }
        *slot = s.storage_read;
    }
};

}  // namespace meander::parse_detail
