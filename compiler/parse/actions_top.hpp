// Actions of the top-level statements: model, weights, ignore, input, output.
#pragma once

#include <fmt/format.h>

#include "actions.hpp"
#include "order.hpp"
#include "state.hpp"

namespace meander::parse_detail {

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

// learn WHAT [by WAY]: which parameters the emitted code may change on the device.
template <> struct action<g::kw_learn> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.learn = LearnSpec{};
        s.learn.loc = loc_of(in, s);
    }
};
template <> struct action<g::learn_biases> {
    template <typename Input>
    static void apply(const Input&, State& s) { s.learn.what = LearnSpec::What::biases; }
};
template <> struct action<g::learn_head> {
    template <typename Input>
    static void apply(const Input&, State& s) { s.learn.what = LearnSpec::What::head; }
};
template <> struct action<g::learn_all> {
    template <typename Input>
    static void apply(const Input&, State& s) { s.learn.what = LearnSpec::What::all; }
};
template <> struct action<g::learn_layer> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.learn.what = LearnSpec::What::layers;
        s.learn.layers.push_back(in.string());
        s.learn.layer_locs.push_back(loc_of(in, s));
    }
};
template <> struct action<g::learn_way> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.learn.way = in.string_view() == "adjoint" ? LearnSpec::Way::adjoint : LearnSpec::Way::steps;
        s.learn.way_loc = loc_of(in, s);
        s.learn.way_written = true;
    }
};
template <> struct action<g::learn_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        const Loc stmt = loc_of(in, s);
        top_level_statement(s, stmt);
        if (s.model.learn) {
            s.error(stmt, fmt::format("a second 'learn' statement (the first is on line {}); name everything that "
                                      "learns in one",
                                      s.model.learn->loc.line));
            return;
        }
        s.model.learn = s.learn;
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
        s.model.input_info = std::move(s.vector);
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
        s.model.output_info = std::move(s.vector);
        s.model.output_name = s.name;
        s.model.output_loc = s.name_loc;
        s.model.output_size = s.size;
    }
};

}  // namespace meander::parse_detail
