// Actions of the input's and output's options: names and units, classes,
// standardisation (mean and scale as tensor names or written numbers). The
// options gather in State::vector; the input and output statements take them.
#pragma once

#include <Eigen/Dense>

#include <string>
#include <string_view>

#include "actions.hpp"
#include "state.hpp"

namespace meander::parse_detail {


// A quoted string's contents with the escapes read (the grammar admits only \" \\ \n).
inline std::string unescaped(std::string_view raw) {
    std::string out;
    for (std::size_t i = 0; i < raw.size(); ++i) {
        if (raw[i] == '\\' && i + 1 < raw.size()) {
            ++i;
            out += raw[i] == 'n' ? '\n' : raw[i];
        } else {
            out += raw[i];
        }
    }
    return out;
}

// Each of input and output starts its options afresh; the statement's action takes them.
template <> struct action<g::kw_input> {
    template <typename Input>
    static void apply(const Input&, State& s) { s.vector = VectorInfo{}; }
};
template <> struct action<g::kw_output> : action<g::kw_input> {};
template <> struct action<g::kw_names> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        const Loc at = loc_of(in, s);
        if (s.vector.names_loc.line > 0) s.error(at, "'names' is given twice in this statement");
        s.vector.names.clear();
        s.vector.units.clear();
        s.vector.name_locs.clear();
        s.vector.names_loc = at;
    }
};
template <> struct action<g::value_name> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.vector.names.push_back(in.string());
        s.vector.units.emplace_back();
        s.vector.name_locs.push_back(loc_of(in, s));
    }
};
template <> struct action<g::value_unit_text> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        std::string unit = unescaped(in.string_view());
        if (unit.empty()) s.error(s.text_loc, "empty unit: leave out 'in \"\"' for a value without a unit");
        if (!s.vector.units.empty()) s.vector.units.back() = std::move(unit);
    }
};
template <> struct action<g::kw_classes> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        const Loc at = loc_of(in, s);
        if (s.vector.classes_loc.line > 0) s.error(at, "'classes' is given twice in this statement");
        s.vector.classes.clear();
        s.vector.class_locs.clear();
        s.vector.classes_loc = at;
    }
};
template <> struct action<g::class_name> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.vector.classes.push_back(in.string());
        s.vector.class_locs.push_back(loc_of(in, s));
    }
};
template <> struct action<g::kw_standardised> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        const Loc at = loc_of(in, s);
        if (s.vector.standardised) s.error(at, "'standardised' is given twice in this statement");
        s.vector.standardised = Standardised{};
        s.vector.standardised->loc = at;
    }
};
// mean and scale: a tensor name, or a bracketed list of numbers.
template <> struct action<g::mean_tensor_text> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        text_action::apply(in, s);
        s.vector.standardised->mean_tensor = s.text;
        s.vector.standardised->mean_loc = s.text_loc;
    }
};
template <> struct action<g::scale_tensor_text> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        text_action::apply(in, s);
        s.vector.standardised->scale_tensor = s.text;
        s.vector.standardised->scale_loc = s.text_loc;
    }
};
template <> struct action<g::mean_open> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.vector.standardised->mean_loc = loc_of(in, s);
        s.values.clear();
        s.value_locs.clear();
    }
};
template <> struct action<g::scale_open> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.vector.standardised->scale_loc = loc_of(in, s);
        s.values.clear();
        s.value_locs.clear();
    }
};
struct list_value_action {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.values.push_back(to_real(in, s));
        s.value_locs.push_back(loc_of(in, s));
    }
};
template <> struct action<g::mean_value> : list_value_action {};
template <> struct action<g::scale_value> : list_value_action {};
template <> struct action<g::mean_values> {
    template <typename Input>
    static void apply(const Input&, State& s) {
        Standardised& st = *s.vector.standardised;
        st.mean = Eigen::Map<const Eigen::VectorXd>(s.values.data(), static_cast<Eigen::Index>(s.values.size()));
        st.mean_value_locs = s.value_locs;
    }
};
template <> struct action<g::scale_values> {
    template <typename Input>
    static void apply(const Input&, State& s) {
        Standardised& st = *s.vector.standardised;
        st.scale = Eigen::Map<const Eigen::VectorXd>(s.values.data(), static_cast<Eigen::Index>(s.values.size()));
        st.scale_value_locs = s.value_locs;
    }
};

}  // namespace meander::parse_detail
