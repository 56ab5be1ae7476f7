// Actions of a dense layer and its options.
#pragma once

#include <fmt/format.h>

#include "actions.hpp"
#include "naming.hpp"
#include "order.hpp"
#include "state.hpp"

namespace meander::parse_detail {

// Dense layers
template <> struct action<g::layer_name> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.dense = Dense{};
        s.dense.name = in.string();
        s.dense.loc = loc_of(in, s);
        s.act_given = s.weight_given = s.bias_given = s.from_given = s.no_bias_given = false;
        s.transposed_given = s.time_first_given = s.storage_given = false;
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

}  // namespace meander::parse_detail
