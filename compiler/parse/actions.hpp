// The action template every rule's action specialises, and the registers shared by
// statements: names, sizes and strings.
#pragma once

#include <string>
#include <string_view>

#include "state.hpp"

namespace meander::parse_detail {

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

}  // namespace meander::parse_detail
