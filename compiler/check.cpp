// Check: shapes and meaning of a parsed model, before weights are read.
// Walks the blocks in order with the width that reaches each one, and
// reports every problem with the layer or block named, expected and actual.
#include "check.hpp"

#include <fmt/format.h>

#include <cfloat>
#include <charconv>
#include <cmath>
#include <map>
#include <string>

#include "../runtime/tableau.hpp"
#include "format.hpp"

namespace meander {

namespace {

bool written(const SolverSpec& s, std::string_view key) {
    for (const auto& k : s.written)
        if (k == key) return true;
    return false;
}

std::string describe(const Block& b) {
    switch (b.kind) {
        case Block::Kind::dense: return fmt::format("layer '{}'", b.dense.name);
        case Block::Kind::residual: return fmt::format("residual '{}'", b.residual.name);
        case Block::Kind::continuous: return fmt::format("continuous '{}'", b.continuous.name);
    }
    return {};
}

// "20 (16 + augment 4)" or "16".
std::string state_text(const Continuous& c) {
    if (c.augment == 0) return fmt::format("{}", c.width);
    return fmt::format("{} ({} + augment {})", c.state(), c.width, c.augment);
}

// Thresholds in messages: three significant digits, exponent written as descriptions write it.
std::string approx(double v) {
    const std::string digits = fmt::format("{:.3g}", v);
    double rounded = v;
    std::from_chars(digits.data(), digits.data() + digits.size(), rounded);
    return format_number(rounded);
}

struct Checker {
    const Model& model;
    const Source& src;
    const CheckOptions& opts;
    Diagnostics& diags;
    std::map<std::string, Loc> names;
    const Block* last_top_layer = nullptr;   // the model's last layer, if the last block is a layer

    void error(Loc loc, std::string message) { diags.error(src, loc, std::move(message)); }
    void warning(Loc loc, std::string message) { diags.warning(src, loc, std::move(message)); }

    void name(const std::string& n, Loc loc) {
        auto [it, fresh] = names.emplace(n, loc);
        if (!fresh) error(loc, fmt::format("duplicate name '{}' (first used on line {})", n, it->second.line));
    }

    void finite(double v, Loc loc, std::string_view what) {
        if (!std::isfinite(v)) error(loc, fmt::format("{} is not finite", what));
    }

    // Checks `blocks` fed with `width` values that come from `from`; returns the width they give.
    int body(const std::vector<Block>& blocks, int width, std::string from, bool in_continuous) {
        for (const Block& b : blocks) {
            switch (b.kind) {
                case Block::Kind::dense: width = dense(b.dense, width, from, in_continuous); break;
                case Block::Kind::residual: width = residual(b.residual, width, from, in_continuous); break;
                case Block::Kind::continuous: width = continuous(b.continuous, width, from); break;
            }
            from = describe(b);
        }
        return width;
    }

    int dense(const Dense& d, int width, const std::string& from, bool in_continuous) {
        name(d.name, d.loc);
        if (d.in < 1) error(d.loc, fmt::format("layer '{}' has input width {}; widths must be at least 1", d.name, d.in));
        else if (d.in != width) error(d.loc, fmt::format("layer '{}' takes {} inputs, but {} gives {}", d.name, d.in, from, width));
        if (d.out < 1) error(d.loc, fmt::format("layer '{}' has output width {}; widths must be at least 1", d.name, d.out));
        if (d.time_input && !in_continuous)
            error(d.loc, fmt::format("layer '{}' uses '+ t', but time exists only inside a continuous block", d.name));
        finite(d.act_param, d.loc, fmt::format("the {} parameter of layer '{}'", activation_name(d.act), d.name));
        return d.out;
    }

    // The width a body ends with must be the width it started with.
    // `start_text` spells the start width, with the augment for a field.
    void round_trip(const std::vector<Block>& blocks, int start, const std::string& start_text, int end, const std::string& what, Loc loc) {
        if (blocks.empty()) {
            error(loc, fmt::format("{} has no layers", what));
            return;
        }
        if (end != start)
            error(loc, fmt::format("{} must map width {} to width {}, but ends with width {} ({})", what, start_text, start, end, describe(blocks.back())));
    }

    int residual(const Residual& r, int width, const std::string& from, bool in_continuous) {
        name(r.name, r.loc);
        if (r.width < 1) error(r.loc, fmt::format("residual '{}' has width {}; widths must be at least 1", r.name, r.width));
        else if (r.width != width) error(r.loc, fmt::format("residual '{}' has width {}, but {} gives {}", r.name, r.width, from, width));
        int end = body(r.body, r.width, fmt::format("the input of residual '{}'", r.name), in_continuous);
        round_trip(r.body, r.width, fmt::format("{}", r.width), end, fmt::format("residual '{}'", r.name), r.loc);
        return r.width;
    }

    int continuous(const Continuous& c, int width, const std::string& from) {
        name(c.name, c.loc);
        if (c.width < 1) error(c.loc, fmt::format("continuous '{}' has width {}; widths must be at least 1", c.name, c.width));
        else if (c.width != width) error(c.loc, fmt::format("continuous '{}' has width {}, but {} gives {}", c.name, c.width, from, width));
        if (c.augment < 0) error(c.loc, fmt::format("continuous '{}' has augment {}; it must be 0 or more", c.name, c.augment));
        finite(c.t0, c.interval_loc, fmt::format("the start time of continuous '{}'", c.name));
        finite(c.t1, c.interval_loc, fmt::format("the end time of continuous '{}'", c.name));
        if (c.t0 == c.t1)
            error(c.interval_loc, fmt::format("continuous '{}' integrates over the empty interval [{}, {}]; t0 and t1 must differ",
                                              c.name, format_number(c.t0), format_number(c.t1)));
        const std::string state = fmt::format("the state of continuous '{}'{}", c.name,
                                              c.augment == 0 ? std::string() : fmt::format(" ({} + augment {})", c.width, c.augment));
        int end = body(c.field, c.state(), state, true);
        round_trip(c.field, c.state(), state_text(c), end, fmt::format("the field of continuous '{}'", c.name), c.loc);
        if (c.solver.method.empty()) {
            error(c.loc, fmt::format("continuous '{}' has no solver line", c.name));
        } else {
            solver(c.solver, fmt::format("solver line of continuous '{}'", c.name), true);
        }
        if (c.trained) {
            solver(*c.trained, fmt::format("trained-with line of continuous '{}'", c.name), false);
            if (!c.solver.method.empty() && !same_discretisation(c.solver, *c.trained))
                warning(c.solver.loc, fmt::format("block '{}' is deployed with {} but was trained with {}; a model can lose accuracy "
                                                  "under another discretisation (Ott et al., ICLR 2021)",
                                                  c.name, format_solver(c.solver), format_solver(*c.trained)));
        }
        return c.state();
    }

    static bool same_discretisation(const SolverSpec& a, const SolverSpec& b) {
        if (a.method != b.method) return false;
        const Tableau* t = find_tableau(a.method);
        if (t && !t->adaptive()) return a.steps == b.steps;
        return a.rtol == b.rtol && a.atol == b.atol && a.max_steps == b.max_steps && a.first_step == b.first_step &&
               a.controller == b.controller && a.safety == b.safety && a.min_factor == b.min_factor &&
               a.max_factor == b.max_factor && a.pi_alpha == b.pi_alpha && a.pi_beta == b.pi_beta && a.steps == b.steps;
    }

    // `deployed`: the solver the emitted code runs, so the precision limits apply to it.
    void solver(const SolverSpec& s, const std::string& ctx, bool deployed) {
        const Tableau* t = find_tableau(s.method);
        if (!t) {
            std::string known;
            for (const Tableau& k : tableaux()) known += (known.empty() ? "" : ", ") + std::string(k.key);
            error(s.loc, fmt::format("{}: unknown method '{}'; known methods: {}", ctx, s.method, known));
            return;
        }
        static constexpr std::string_view adaptive_only[] = {"rtol", "atol", "max-steps", "first-step", "controller",
                                                             "safety", "min-factor", "max-factor", "pi-alpha", "pi-beta"};
        if (!t->adaptive()) {
            if (!written(s, "steps")) error(s.loc, fmt::format("{}: fixed-step method '{}' needs 'steps N'", ctx, s.method));
            else if (s.steps < 1) error(s.loc, fmt::format("{}: steps must be at least 1, got {}", ctx, s.steps));
            for (std::string_view key : adaptive_only)
                if (written(s, key))
                    error(s.loc, fmt::format("{}: fixed-step method '{}' takes no '{}' option (it applies to adaptive methods)", ctx, s.method, key));
            return;
        }
        if (written(s, "steps"))
            error(s.loc, fmt::format("{}: adaptive method '{}' takes no 'steps' option (it applies to fixed-step methods)", ctx, s.method));
        for (auto [key, v] : {std::pair<std::string_view, double>{"rtol", s.rtol}, {"atol", s.atol}, {"first-step", s.first_step},
                              {"safety", s.safety}, {"min-factor", s.min_factor}, {"max-factor", s.max_factor},
                              {"pi-alpha", s.pi_alpha}, {"pi-beta", s.pi_beta}})
            finite(v, s.loc, fmt::format("{}: {}", ctx, key));
        if (!written(s, "rtol")) error(s.loc, fmt::format("{}: adaptive method '{}' needs 'rtol X'", ctx, s.method));
        else if (!(s.rtol > 0)) error(s.loc, fmt::format("{}: rtol must be greater than 0, got {}", ctx, format_number(s.rtol)));
        else if (deployed) precision(s, ctx);
        if (!written(s, "atol")) error(s.loc, fmt::format("{}: adaptive method '{}' needs 'atol X'", ctx, s.method));
        else if (!(s.atol > 0)) error(s.loc, fmt::format("{}: atol must be greater than 0, got {}", ctx, format_number(s.atol)));
        if (!written(s, "max-steps"))
            error(s.loc, fmt::format("{}: adaptive method '{}' needs 'max-steps N': without a step limit an inference has no time bound", ctx, s.method));
        else if (s.max_steps < 1) error(s.loc, fmt::format("{}: max-steps must be at least 1, got {}", ctx, s.max_steps));
        if (written(s, "first-step") && !(s.first_step > 0))
            error(s.loc, fmt::format("{}: first-step must be greater than 0, got {}", ctx, format_number(s.first_step)));
        if (!(s.safety > 0 && s.safety < 1))
            error(s.loc, fmt::format("{}: safety must lie strictly between 0 and 1, got {}", ctx, format_number(s.safety)));
        if (!(s.min_factor > 0 && s.min_factor <= 1))
            error(s.loc, fmt::format("{}: min-factor must satisfy 0 < min-factor <= 1, got {}", ctx, format_number(s.min_factor)));
        if (!(s.max_factor >= 1))
            error(s.loc, fmt::format("{}: max-factor must be at least 1, got {}", ctx, format_number(s.max_factor)));
        if (s.controller == Controller::integral)
            for (std::string_view key : {"pi-alpha", "pi-beta"})
                if (written(s, key)) warning(s.loc, fmt::format("{}: '{}' has no effect with the integral controller", ctx, key));
    }

    // rtol against the unit roundoff of the arithmetic the emitted code uses.
    void precision(const SolverSpec& s, const std::string& ctx) {
        const bool single = opts.precision == Precision::float32;
        const double eps = single ? static_cast<double>(FLT_EPSILON) : DBL_EPSILON;
        const char* type = single ? "float32" : "float64";
        if (s.rtol < 100 * eps) {
            error(s.loc, fmt::format("{}: rtol {} is below what {} arithmetic can deliver (100 x epsilon = {})", ctx,
                                     format_number(s.rtol), type, approx(100 * eps)));
        } else if (single && s.rtol < std::sqrt(eps)) {
            warning(s.loc, fmt::format("{}: rtol {} is below sqrt(float32 epsilon) = {}; the error control may not reach it in float32",
                                       ctx, format_number(s.rtol), approx(std::sqrt(eps))));
        }
    }

    // The model name becomes the emitted C++ namespace and the prefix of its macros.
    void model_name() {
        static const char* const reserved[] = {
            "alignas", "alignof", "and", "and_eq", "asm", "auto", "bitand", "bitor", "bool", "break", "case", "catch",
            "char", "char8_t", "char16_t", "char32_t", "class", "compl", "concept", "const", "consteval", "constexpr",
            "constinit", "const_cast", "continue", "co_await", "co_return", "co_yield", "decltype", "default", "delete",
            "do", "double", "dynamic_cast", "else", "enum", "explicit", "export", "extern", "false", "float", "for",
            "friend", "goto", "if", "inline", "int", "long", "mutable", "namespace", "new", "noexcept", "not", "not_eq",
            "nullptr", "operator", "or", "or_eq", "private", "protected", "public", "register", "reinterpret_cast",
            "requires", "return", "short", "signed", "sizeof", "static", "static_assert", "static_cast", "struct",
            "switch", "template", "this", "thread_local", "throw", "true", "try", "typedef", "typeid", "typename",
            "union", "unsigned", "using", "virtual", "void", "volatile", "wchar_t", "while", "xor", "xor_eq",
            // names the emitted code and its includes use at namespace scope
            "std", "real", "result", "context", "counters", "infer", "main",
        };
        const std::string& n = model.name;
        for (const char* r : reserved)
            if (n == r) {
                error(model.loc, fmt::format("model name '{}' cannot be used: it becomes the emitted C++ namespace, and '{}' "
                                             "is a C++ keyword or a name the emitted code uses",
                                             n, n));
                return;
            }
        if (n.find("__") != std::string::npos || n[0] == '_')
            error(model.loc, fmt::format("model name '{}' cannot be used: names beginning with '_' or containing '__' are "
                                         "reserved in C++",
                                         n));
    }

    void run() {
        if (!model.name.empty()) model_name();
        if (model.input_size < 1)
            error(model.input_loc, fmt::format("input '{}' has size {}; sizes must be at least 1", model.input_name, model.input_size));
        if (model.blocks.empty()) error(model.loc, fmt::format("model '{}' has no layers or blocks", model.name));
        if (!model.blocks.empty() && model.blocks.back().kind == Block::Kind::dense) last_top_layer = &model.blocks.back();
        int width = body(model.blocks, model.input_size, fmt::format("input '{}'", model.input_name), false);
        softmax(model.blocks);
        if (model.output_size < 1)
            error(model.output_loc, fmt::format("output '{}' has size {}; sizes must be at least 1", model.output_name, model.output_size));
        else if (model.output_size != width) {
            std::string from = model.blocks.empty() ? fmt::format("input '{}'", model.input_name) : describe(model.blocks.back());
            error(model.output_loc, fmt::format("output '{}' has size {}, but {} gives {}", model.output_name, model.output_size, from, width));
        }
    }

    // Softmax normalises the model's result; anywhere else it would feed a later layer.
    void softmax(const std::vector<Block>& blocks) {
        for (const Block& b : blocks) {
            if (b.kind == Block::Kind::dense && b.dense.act == Activation::softmax && &b != last_top_layer)
                error(b.dense.loc, fmt::format("softmax is allowed only on the model's last layer, not on layer '{}'", b.dense.name));
            if (b.kind == Block::Kind::residual) softmax(b.residual.body);
            if (b.kind == Block::Kind::continuous) softmax(b.continuous.field);
        }
    }
};

}  // namespace

bool check_model(const Model& model, const Source& src, const CheckOptions& opts, Diagnostics& diags) {
    const int before = diags.error_count();
    Checker c{model, src, opts, diags, {}, nullptr};
    c.run();
    return diags.error_count() == before;
}

}  // namespace meander
