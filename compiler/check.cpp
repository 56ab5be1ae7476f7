// Check: shapes and meaning of a parsed model, before weights are read.
// Walks the blocks in order with the width that reaches each one, and
// reports every problem with the layer or block named, expected and actual.
#include "check.hpp"

#include <fmt/format.h>

#include <cfloat>
#include <charconv>
#include <climits>
#include <cmath>
#include <map>
#include <string>
#include <utility>

#include "../runtime/evaluate.hpp"
#include "../runtime/integrate.hpp"
#include "../runtime/stream.hpp"
#include "../runtime/tableau.hpp"
#include "format.hpp"
#include "learn.hpp"

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

// The largest size of an input, output, layer or state: keeps every width and
// width + augment far inside int.
constexpr int kMaxWidth = 1 << 20;

// The model name names the emitted files ("NAME_selftest.hpp", and while
// writing "NAME_selftest.hpp.meander-XXXXXX"): 128 leaves room under the
// 255-byte file name limit of ext4, XFS, Btrfs, APFS and NTFS.
constexpr std::size_t kMaxModelName = 128;

// The emitted field-evaluation counters are std::uint32_t.
constexpr long long kMaxFieldEvals = 4294967295LL;

// The width after a block whose width cannot be represented (a state beyond
// kMaxWidth): later width comparisons are skipped rather than reported twice.
constexpr int kUnknownWidth = INT_MIN;

// worst_field_evals multiplies max-steps (an int) by up to 7 stages.
static_assert(sizeof(long) >= 8, "worst_field_evals needs a 64-bit long");

// width + augment without int overflow.
long long state_width(const Continuous& c) { return static_cast<long long>(c.width) + c.augment; }

// "20 (16 + augment 4)" or "16".
std::string state_text(const Continuous& c) {
    if (c.augment == 0) return fmt::format("{}", c.width);
    return fmt::format("{} ({} + augment {})", state_width(c), c.width, c.augment);
}

// Shortest text that reads back to the same float, written as descriptions write numbers.
std::string float_number(float v) {
    const std::string digits = fmt::format("{}", v);
    double d = static_cast<double>(v);
    std::from_chars(digits.data(), digits.data() + digits.size(), d);
    return format_number(d);
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
    long long total_field_evals = 0;         // over the continuous blocks whose solver line is valid
    const Continuous* total_passes_limit = nullptr;  // the block at which that sum first exceeds kMaxFieldEvals

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
        else if (d.in > kMaxWidth)
            error(d.loc, fmt::format("layer '{}' has input width {}; widths must be at most {}", d.name, d.in, kMaxWidth));
        else if (width != kUnknownWidth && d.in != width)
            error(d.loc, fmt::format("layer '{}' takes {} inputs, but {} gives {}", d.name, d.in, from, width));
        if (d.out < 1) error(d.loc, fmt::format("layer '{}' has output width {}; widths must be at least 1", d.name, d.out));
        else if (d.out > kMaxWidth)
            error(d.loc, fmt::format("layer '{}' has output width {}; widths must be at most {}", d.name, d.out, kMaxWidth));
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
        if (start != kUnknownWidth && end != kUnknownWidth && end != start)
            error(loc, fmt::format("{} must map width {} to width {}, but ends with width {} ({})", what, start_text, start, end, describe(blocks.back())));
    }

    int residual(const Residual& r, int width, const std::string& from, bool in_continuous) {
        name(r.name, r.loc);
        if (r.width < 1) error(r.loc, fmt::format("residual '{}' has width {}; widths must be at least 1", r.name, r.width));
        else if (r.width > kMaxWidth)
            error(r.loc, fmt::format("residual '{}' has width {}; widths must be at most {}", r.name, r.width, kMaxWidth));
        else if (width != kUnknownWidth && r.width != width) error(r.loc, fmt::format("residual '{}' has width {}, but {} gives {}", r.name, r.width, from, width));
        int end = body(r.body, r.width, fmt::format("the input of residual '{}'", r.name), in_continuous);
        round_trip(r.body, r.width, fmt::format("{}", r.width), end, fmt::format("residual '{}'", r.name), r.loc);
        return r.width;
    }

    int continuous(const Continuous& c, int width, const std::string& from) {
        name(c.name, c.loc);
        if (c.width < 1) error(c.loc, fmt::format("continuous '{}' has width {}; widths must be at least 1", c.name, c.width));
        else if (c.width > kMaxWidth)
            error(c.loc, fmt::format("continuous '{}' has width {}; widths must be at most {}", c.name, c.width, kMaxWidth));
        else if (width != kUnknownWidth && c.width != width)
            error(c.loc, fmt::format("continuous '{}' has width {}, but {} gives {}", c.name, c.width, from, width));
        if (c.augment < 0) error(c.loc, fmt::format("continuous '{}' has augment {}; it must be 0 or more", c.name, c.augment));
        else if (c.augment > kMaxWidth)
            error(c.loc, fmt::format("continuous '{}' has augment {}; it must be at most {}", c.name, c.augment, kMaxWidth));
        else if (c.width <= kMaxWidth && state_width(c) > kMaxWidth)
            error(c.loc, fmt::format("the state of continuous '{}' has width {}; widths must be at most {}", c.name,
                                     state_text(c), kMaxWidth));
        // Widths out of range have been reported; the field is still checked, its first width unknown.
        const long long sw = state_width(c);
        const int start = (sw > kMaxWidth || sw < -kMaxWidth) ? kUnknownWidth : static_cast<int>(sw);
        if (c.over_gap)
            gap_interval(c);
        else
            interval(c);
        const std::string state = fmt::format("the state of continuous '{}'{}", c.name,
                                              c.augment == 0 ? std::string() : fmt::format(" ({} + augment {})", c.width, c.augment));
        int end = body(c.field, start, state, true);
        round_trip(c.field, start, state_text(c), end, fmt::format("the field of continuous '{}'", c.name), c.loc);
        if (c.solver.method.empty()) {
            error(c.loc, fmt::format("continuous '{}' has no solver line", c.name));
        } else {
            const int before = diags.error_count();
            solver(c.solver, fmt::format("solver line of continuous '{}'", c.name), true, c.over_gap);
            if (diags.error_count() == before) field_evals(c);
        }
        if (c.trained) {
            solver(*c.trained, fmt::format("trained-with line of continuous '{}'", c.name), false, c.over_gap);
            if (!c.solver.method.empty() && !same_discretisation(c.solver, *c.trained))
                warning(c.solver.loc, fmt::format("block '{}' is deployed with {} but was trained with {}; a model can lose accuracy "
                                                  "under another discretisation (Ott et al., ICLR 2021)",
                                                  c.name, format_solver(c.solver), format_solver(*c.trained)));
        }
        return start;
    }

    // The interval must be finite and must not vanish or overflow in the arithmetic the
    // emitted code uses: the solver divides it into steps of (t1 - t0) / steps.
    void interval(const Continuous& c) {
        const std::string text = fmt::format("[{}, {}]", format_number(c.t0), format_number(c.t1));
        if (!std::isfinite(c.t0) || !std::isfinite(c.t1)) {
            finite(c.t0, c.interval_loc, fmt::format("the start time of continuous '{}'", c.name));
            finite(c.t1, c.interval_loc, fmt::format("the end time of continuous '{}'", c.name));
            return;
        }
        if (c.t0 == c.t1) {
            error(c.interval_loc, fmt::format("continuous '{}' integrates over the empty interval {}; t0 and t1 must differ", c.name, text));
            return;
        }
        if (!std::isfinite(c.t1 - c.t0)) {
            error(c.interval_loc, fmt::format("continuous '{}' integrates over {}, whose length t1 - t0 is not finite in float64",
                                              c.name, text));
            return;
        }
        if (opts.precision != Precision::float32) return;
        const double flt_max = static_cast<double>(FLT_MAX);
        for (auto [v, end] : {std::pair<double, const char*>{c.t0, "start"}, {c.t1, "end"}})
            if (std::fabs(v) > flt_max) {
                error(c.interval_loc, fmt::format("continuous '{}' integrates over {}: the {} time {} is beyond the largest float32 "
                                                  "value {}",
                                                  c.name, text, end, format_number(v), format_number(flt_max)));
                return;
            }
        const float f0 = static_cast<float>(c.t0);
        const float f1 = static_cast<float>(c.t1);
        if (f0 == f1) {
            error(c.interval_loc, fmt::format("continuous '{}' integrates over {}, which is empty in float32: both ends round to {}",
                                              c.name, text, float_number(f0)));
        } else if (!std::isfinite(f1 - f0)) {
            error(c.interval_loc, fmt::format("continuous '{}' integrates over {}, whose length t1 - t0 is not finite in float32",
                                              c.name, text));
        }
    }

    // A streaming evolution runs over [0, gap]: it starts at 0 and keeps no augment between observations.
    void gap_interval(const Continuous& c) {
        if (c.t0 != 0.0)
            error(c.interval_loc, fmt::format("continuous '{}' runs over [{}, gap]; an evolution over the gap starts at 0",
                                              c.name, format_number(c.t0)));
        if (!model.stream) return;
        if (c.augment != 0)
            error(c.loc, fmt::format("continuous '{}': augment is not allowed in the evolution of a streaming model (the state "
                                     "carries no extra dimensions between observations); widen the state instead",
                                     c.name));
    }

    // The emitted code counts field evaluations in std::uint32_t, per block and per model.
    void field_evals(const Continuous& c) {
        if (c.over_gap && model.stream) {
            // At the largest gap; a budget beyond a long is reported before it is multiplied out.
            const double steps = std::ceil(model.stream->largest_gap * c.solver.steps_per_unit);
            const Tableau* t = find_tableau(c.solver.method);
            if (t && !t->adaptive() && steps > static_cast<double>(INT_MAX)) {
                error(c.solver.loc, fmt::format("solver line of continuous '{}': {} steps at the largest gap {}, more than the "
                                                "emitted code can count ({})",
                                                c.name, format_number(steps), format_number(model.stream->largest_gap), INT_MAX));
                return;
            }
        }
        const long n = c.over_gap && model.stream ? worst_evolve_field_evals(*model.stream) : worst_field_evals(c.solver);
        if (n > kMaxFieldEvals) {
            error(c.solver.loc, fmt::format("solver line of continuous '{}': up to {} field evaluations per inference, more than "
                                            "the emitted 32-bit counters hold ({})",
                                            c.name, n, kMaxFieldEvals));
            return;
        }
        total_field_evals += n;
        if (total_field_evals > kMaxFieldEvals && !total_passes_limit) total_passes_limit = &c;
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
    // `over_gap`: the solver of a streaming evolution, whose fixed-step budget is steps-per-unit.
    void solver(const SolverSpec& s, const std::string& ctx, bool deployed, bool over_gap = false) {
        const Tableau* t = find_tableau(s.method);
        if (!t) {
            std::string known;
            for (const Tableau& k : tableaux()) known += (known.empty() ? "" : ", ") + std::string(k.key);
            error(s.loc, fmt::format("{}: unknown method '{}'; known methods: {}", ctx, s.method, known));
            return;
        }
        static constexpr std::string_view adaptive_only[] = {"rtol", "atol", "max-steps", "first-step", "controller",
                                                             "safety", "min-factor", "max-factor", "pi-alpha", "pi-beta"};
        if (!t->adaptive() && over_gap) {
            if (written(s, "steps"))
                error(s.loc, fmt::format("{}: over a run-time gap a fixed-step method takes 'steps-per-unit X' (steps per unit of "
                                         "time), not 'steps'", ctx));
            else if (!written(s, "steps-per-unit"))
                error(s.loc, fmt::format("{}: fixed-step method '{}' over a run-time gap needs 'steps-per-unit X'", ctx, s.method));
            else if (!std::isfinite(s.steps_per_unit) || !(s.steps_per_unit > 0))
                error(s.loc, fmt::format("{}: steps-per-unit must be a finite number above 0, got {}", ctx,
                                         format_number(s.steps_per_unit)));
        } else if (written(s, "steps-per-unit")) {
            error(s.loc, fmt::format("{}: 'steps-per-unit' applies only to a fixed-step method over a run-time gap "
                                     "(t in [0, gap])", ctx));
        }
        if (!t->adaptive()) {
            if (over_gap) {
                // checked above
            } else if (!written(s, "steps")) error(s.loc, fmt::format("{}: fixed-step method '{}' needs 'steps N'", ctx, s.method));
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

    // The model name becomes the emitted C++ namespace and the prefix of its macros; the
    // emitted code includes <cmath>, <cstdint> and <cstddef>, whose macros and global
    // names (and those of <cstdlib>, which <cmath> includes) a namespace cannot share.
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
        if (n.size() > kMaxModelName)
            return error(model.loc, fmt::format("model name '{}...' is {} characters long; names must be at most {}: it "
                                                "names the emitted files, and file systems take at most 255 bytes",
                                                n.substr(0, 16), n.size(), kMaxModelName));
        auto refuse = [&](std::string_view why) {
            error(model.loc, fmt::format("model name '{}' cannot be used: it becomes the emitted C++ namespace, and '{}' {}", n, n, why));
        };
        for (const char* r : reserved)
            if (n == r) return refuse("is a C++ keyword or a name the emitted code uses");
        if (n.find("__") != std::string::npos || n[0] == '_')
            return error(model.loc, fmt::format("model name '{}' cannot be used: names beginning with '_' or containing '__' are "
                                                "reserved in C++",
                                                n));
        if (const char* which = compiler_macro(n)) return refuse(fmt::format("is a macro predefined by {}", which));
        if (const char* header = c_macro(n)) return refuse(fmt::format("is a macro of the C library ({})", header));
        if (const char* header = c_type(n)) return refuse(fmt::format("is a type of the C library ({})", header));
        if (const char* header = c_function(n)) return refuse(fmt::format("is a function of the C library ({})", header));
        if (n.size() > 2 && n.compare(n.size() - 2, 2, "_t") == 0)
            error(model.loc, fmt::format("model name '{}' cannot be used: names ending in '_t' are reserved for types by POSIX", n));
    }

    // The compilers that predefine `n` as a macro, or null. Source: the names
    // without a leading '_' in `-std=gnu++17 -dM -E` of GCC 12 (x86-64) and
    // Clang 14 for x86-64, i386, MIPS and SPARC Solaris targets (Debian 12),
    // which are those of the GCC manual's "System-specific Predefined Macros"
    // (unix, linux, i386, sun, sparc, mips; vax there too). Under GNU dialects
    // (GCC's default) `namespace linux` reads `namespace 1`.
    static const char* compiler_macro(const std::string& n) {
        static const char* const names[] = {"linux", "unix", "i386", "sun", "sparc", "mips", "vax", "MIPSEB", "MIPSEL"};
        for (const char* m : names)
            if (n == m) return "GCC and Clang under GNU dialects (-std=gnu++17, their default) on some targets";
        return nullptr;
    }

    // The header that defines macro `n`, or null.
    static const char* c_macro(const std::string& n) {
        // Macros (or macro-like names) of the C library that firmware often
        // includes before the emitted header, C17 (ISO/IEC 9899:2018) clause 7:
        // a namespace of that name breaks as soon as the header comes first.
        static const std::pair<const char*, const char*> clib[] = {
            {"errno", "<cerrno>"}, {"assert", "<cassert>"}, {"NDEBUG", "<cassert>"},
            {"stdin", "<cstdio>"}, {"stdout", "<cstdio>"}, {"stderr", "<cstdio>"}, {"EOF", "<cstdio>"},
            {"BUFSIZ", "<cstdio>"}, {"FILENAME_MAX", "<cstdio>"}, {"FOPEN_MAX", "<cstdio>"}, {"L_tmpnam", "<cstdio>"},
            {"TMP_MAX", "<cstdio>"}, {"SEEK_SET", "<cstdio>"}, {"SEEK_CUR", "<cstdio>"}, {"SEEK_END", "<cstdio>"},
            {"EXIT_SUCCESS", "<cstdlib>"}, {"EXIT_FAILURE", "<cstdlib>"}, {"RAND_MAX", "<cstdlib>"},
            {"MB_CUR_MAX", "<cstdlib>"}, {"MB_LEN_MAX", "<climits>"}, {"CHAR_BIT", "<climits>"},
            {"setjmp", "<csetjmp>"}, {"va_start", "<cstdarg>"}, {"va_arg", "<cstdarg>"}, {"va_end", "<cstdarg>"},
            {"va_copy", "<cstdarg>"}, {"CLOCKS_PER_SEC", "<ctime>"}, {"TIME_UTC", "<ctime>"}, {"WEOF", "<cwchar>"},
            {"complex", "<complex.h>"}, {"imaginary", "<complex.h>"}, {"I", "<complex.h>"},
            {"noreturn", "<stdnoreturn.h>"}, {"kill_dependency", "<stdatomic.h>"}, {"ONCE_FLAG_INIT", "<threads.h>"},
            {"TSS_DTOR_ITERATIONS", "<threads.h>"},
        };
        for (const auto& [m, header] : clib)
            if (n == m) return header;
        // The error numbers of <errno.h> (C17 7.5: EDOM, EILSEQ, ERANGE; POSIX.1-2017 <errno.h>: the rest) and
        // the signals of <signal.h> (C17 7.14; POSIX.1-2017 <signal.h>). C reserves all of E + capital and
        // SIG + capital for them (C17 7.31.3, 7.31.7); the names that exist are refused, so ECG_filter stays usable.
        static const char* const errnos[] = {
            "E2BIG", "EACCES", "EADDRINUSE", "EADDRNOTAVAIL", "EAFNOSUPPORT", "EAGAIN", "EALREADY", "EBADF", "EBADMSG",
            "EBUSY", "ECANCELED", "ECHILD", "ECONNABORTED", "ECONNREFUSED", "ECONNRESET", "EDEADLK", "EDESTADDRREQ",
            "EDOM", "EDQUOT", "EEXIST", "EFAULT", "EFBIG", "EHOSTUNREACH", "EIDRM", "EILSEQ", "EINPROGRESS", "EINTR",
            "EINVAL", "EIO", "EISCONN", "EISDIR", "ELOOP", "EMFILE", "EMLINK", "EMSGSIZE", "EMULTIHOP", "ENAMETOOLONG",
            "ENETDOWN", "ENETRESET", "ENETUNREACH", "ENFILE", "ENOBUFS", "ENODATA", "ENODEV", "ENOENT", "ENOEXEC",
            "ENOLCK", "ENOLINK", "ENOMEM", "ENOMSG", "ENOPROTOOPT", "ENOSPC", "ENOSR", "ENOSTR", "ENOSYS", "ENOTCONN",
            "ENOTDIR", "ENOTEMPTY", "ENOTRECOVERABLE", "ENOTSOCK", "ENOTSUP", "ENOTTY", "ENXIO", "EOPNOTSUPP",
            "EOVERFLOW", "EOWNERDEAD", "EPERM", "EPIPE", "EPROTO", "EPROTONOSUPPORT", "EPROTOTYPE", "ERANGE", "EROFS",
            "ESPIPE", "ESRCH", "ESTALE", "ETIME", "ETIMEDOUT", "ETXTBSY", "EWOULDBLOCK", "EXDEV",
        };
        for (const char* m : errnos)
            if (n == m) return "<cerrno>";
        static const char* const signals[] = {
            "SIGABRT", "SIGFPE", "SIGILL", "SIGINT", "SIGSEGV", "SIGTERM", "SIG_DFL", "SIG_ERR", "SIG_IGN", "SIGALRM",
            "SIGBUS", "SIGCHLD", "SIGCONT", "SIGHUP", "SIGKILL", "SIGPIPE", "SIGQUIT", "SIGSTOP", "SIGTSTP", "SIGTTIN",
            "SIGTTOU", "SIGUSR1", "SIGUSR2", "SIGPOLL", "SIGPROF", "SIGSYS", "SIGTRAP", "SIGURG", "SIGVTALRM",
            "SIGXCPU", "SIGXFSZ",
        };
        for (const char* m : signals)
            if (n == m) return "<csignal>";
        // Families whose every member is a macro name by the standard: LC_ + capital (<locale.h>, 7.31.5),
        // FE_ + capital (<fenv.h>, 7.31.4), PRI/SCN + lowercase or X (<inttypes.h>, 7.31.6), and <float.h>'s
        // FLT_, DBL_, LDBL_ limits (7.7).
        auto capital = [&](std::size_t i) { return i < n.size() && n[i] >= 'A' && n[i] <= 'Z'; };
        auto starts = [&](std::string_view p) { return n.compare(0, p.size(), p) == 0; };
        if (starts("LC_") && capital(3)) return "<clocale>";
        if (starts("FE_") && capital(3)) return "<cfenv>";
        if ((starts("PRI") || starts("SCN")) && n.size() > 3 && ((n[3] >= 'a' && n[3] <= 'z') || n[3] == 'X'))
            return "<cinttypes>";
        if (starts("FLT_") || starts("DBL_") || starts("LDBL_")) return "<cfloat>";
        static const char* const cmath[] = {
            "NAN", "INFINITY", "HUGE_VAL", "HUGE_VALF", "HUGE_VALL", "FP_NAN", "FP_INFINITE", "FP_ZERO", "FP_NORMAL",
            "FP_SUBNORMAL", "FP_FAST_FMA", "FP_FAST_FMAF", "FP_FAST_FMAL", "FP_ILOGB0", "FP_ILOGBNAN", "FP_INT_UPWARD",
            "FP_INT_DOWNWARD", "FP_INT_TOWARDZERO", "FP_INT_TONEARESTFROMZERO", "FP_INT_TONEAREST", "MATH_ERRNO",
            "MATH_ERREXCEPT", "math_errhandling", "M_E", "M_LOG2E", "M_LOG10E", "M_LN2", "M_LN10", "M_PI", "M_PI_2",
            "M_PI_4", "M_1_PI", "M_2_PI", "M_2_SQRTPI", "M_SQRT2", "M_SQRT1_2",
        };
        for (const char* m : cmath)
            if (n == m) return "<cmath>";
        if (n == "NULL" || n == "offsetof") return "<cstddef>";
        // The limit and constant macros of <cstdint> (INT8_MIN, UINT_LEAST16_MAX, INTMAX_C, SIZE_MAX, ...) and
        // of <climits> (INT_MAX, ...): a stem of the family, then _MIN, _MAX, _C or _WIDTH.
        static const char* const stems[] = {"INT", "INTPTR", "INTMAX", "PTRDIFF", "SIZE", "SIG_ATOMIC", "WCHAR", "WINT",
                                            "CHAR", "SCHAR", "SHRT", "LONG", "LLONG"};
        static const char* const suffixes[] = {"_MIN", "_MAX", "_C", "_WIDTH"};
        for (const char* suffix : suffixes) {
            const std::string_view sfx(suffix);
            if (n.size() <= sfx.size() || n.compare(n.size() - sfx.size(), sfx.size(), sfx) != 0) continue;
            std::string_view stem(n.data(), n.size() - sfx.size());
            if (stem.size() > 1 && stem[0] == 'U') stem.remove_prefix(1);
            for (const char* s : stems)
                if (stem == s) return "<cstdint>";
            // INT8, INT_LEAST16, INT_FAST32, ...
            for (std::string_view kind : {"INT", "INT_LEAST", "INT_FAST"})
                for (std::string_view bits : {"8", "16", "32", "64"})
                    if (stem.size() == kind.size() + bits.size() && stem.substr(0, kind.size()) == kind &&
                        stem.substr(kind.size()) == bits)
                        return "<cstdint>";
        }
        return nullptr;
    }

    static const char* c_type(const std::string& n) {
        static const char* const cstdint[] = {
            "int8_t", "int16_t", "int32_t", "int64_t", "uint8_t", "uint16_t", "uint32_t", "uint64_t",
            "int_least8_t", "int_least16_t", "int_least32_t", "int_least64_t", "uint_least8_t", "uint_least16_t",
            "uint_least32_t", "uint_least64_t", "int_fast8_t", "int_fast16_t", "int_fast32_t", "int_fast64_t",
            "uint_fast8_t", "uint_fast16_t", "uint_fast32_t", "uint_fast64_t", "intptr_t", "uintptr_t", "intmax_t",
            "uintmax_t",
        };
        for (const char* t : cstdint)
            if (n == t) return "<cstdint>";
        for (const char* t : {"size_t", "ptrdiff_t", "max_align_t", "nullptr_t", "byte"})
            if (n == t) return "<cstddef>";
        if (n == "float_t" || n == "double_t") return "<cmath>";
        return nullptr;
    }

    static const char* c_function(const std::string& n) {
        // Classification macros of C; C++ declares them as functions.
        static const char* const classify[] = {"fpclassify", "isfinite", "isinf", "isnan", "isnormal", "signbit",
                                               "isgreater", "isgreaterequal", "isless", "islessequal", "islessgreater",
                                               "isunordered"};
        for (const char* f : classify)
            if (n == f) return "<cmath>";
        // Each also comes with a float ('f') and a long double ('l') variant.
        static const char* const math[] = {
            "acos", "asin", "atan", "atan2", "cos", "sin", "tan", "acosh", "asinh", "atanh", "cosh", "sinh", "tanh",
            "exp", "exp2", "expm1", "frexp", "ilogb", "ldexp", "log", "log10", "log1p", "log2", "logb", "modf",
            "scalbn", "scalbln", "cbrt", "fabs", "hypot", "pow", "sqrt", "erf", "erfc", "lgamma", "tgamma", "ceil",
            "floor", "nearbyint", "rint", "lrint", "llrint", "round", "lround", "llround", "trunc", "fmod",
            "remainder", "remquo", "copysign", "nan", "nextafter", "nexttoward", "fdim", "fmax", "fmin", "fma",
        };
        for (const char* f : math) {
            const std::string_view base(f);
            if (n == base || (n.size() == base.size() + 1 && n.compare(0, base.size(), base) == 0 &&
                              (n.back() == 'f' || n.back() == 'l')))
                return "<cmath>";
        }
        static const char* const cstdlib[] = {
            "abs", "labs", "llabs", "div", "ldiv", "lldiv", "malloc", "calloc", "realloc", "free", "exit", "abort",
            "atexit", "quick_exit", "at_quick_exit", "atoi", "atol", "atoll", "atof", "strtol", "strtoul", "strtoll",
            "strtoull", "strtod", "strtof", "strtold", "rand", "srand", "qsort", "bsearch", "getenv", "system",
        };
        for (const char* f : cstdlib)
            if (n == f) return "<cstdlib>";
        return nullptr;
    }

    // The emitted header states parameters and MACs per field evaluation as
    // 32-bit constants and the worst-case MACs as a 64-bit one; a model too big
    // for them would emit a header that does not compile. With every width at
    // most kMaxWidth a layer's MACs stay below 2^41, so the sums fit a long;
    // only the worst case per inference needs a wider type.
    void constants_fit() {
        long params = 0, macs = 0, field = 0;
        for_each_dense(model.blocks, [&](const Dense& d) {
            params += dense_macs(d) + (d.has_bias ? d.out : 0);
            macs += dense_macs(d);
        });
        long double worst = 0;
        for (const Block& b : model.blocks)
            if (b.kind == Block::Kind::continuous) {
                const long f = field_macs(b.continuous);
                field += f;
                worst += static_cast<long double>(f) * static_cast<long double>(worst_field_evals(b.continuous.solver));
            }
        worst += static_cast<long double>(macs - field);  // the layers outside fields run once
        const long u32 = 4294967295L;
        if (params > u32)
            error(model.loc, fmt::format("model '{}' has {} parameters, more than the emitted 32-bit constant holds ({})",
                                         model.name, params, u32));
        else if (field > u32)
            error(model.loc, fmt::format("model '{}' needs {} multiply-accumulates per field evaluation, more than the "
                                         "emitted 32-bit constant holds ({})", model.name, field, u32));
        else if (worst > 18446744073709551615.0L)
            error(model.loc, fmt::format("model '{}' needs up to {:.3Le} multiply-accumulates per inference, more than "
                                         "the emitted 64-bit constant holds", model.name, worst));
    }

    // A streaming model: state, evolution, update; returns the width the readout receives.
    int stream(const Stream& st) {
        name(st.state_name, st.state_loc);
        const std::string state = fmt::format("state '{}'", st.state_name);
        if (st.state_size < 1)
            error(st.state_loc, fmt::format("{} has size {}; sizes must be at least 1", state, st.state_size));
        else if (st.state_size > kMaxWidth)
            error(st.state_loc, fmt::format("{} has size {}; sizes must be at most {}", state, st.state_size, kMaxWidth));
        const int width = st.state_size >= 1 && st.state_size <= kMaxWidth ? st.state_size : kUnknownWidth;
        largest_gap(st);
        const Continuous& c = st.evolve;
        if (c.blend)
            blend(c, width, state);
        else
            continuous(c, width, state);
        update(st, width, state);
        return width;
    }

    void largest_gap(const Stream& st) {
        const std::string text = format_number(st.largest_gap);
        if (!std::isfinite(st.largest_gap) || !(st.largest_gap > 0)) {
            error(st.gap_loc, fmt::format("largest-gap must be a finite number above 0, got {}", text));
            return;
        }
        if (opts.precision == Precision::float32 &&
            (st.largest_gap > static_cast<double>(FLT_MAX) || static_cast<float>(st.largest_gap) == 0.0f))
            error(st.gap_loc, fmt::format("largest-gap {} is outside what float32 holds (above 0, at most {})", text,
                                          format_number(static_cast<double>(FLT_MAX))));
    }

    // The closed-form cell: a backbone (any layers) and three heads f, g, k, each mapping the
    // backbone's output to the state.
    void blend(const Continuous& c, int width, const std::string& from) {
        name(c.name, c.loc);
        if (width != kUnknownWidth && c.width != width)
            error(c.loc, fmt::format("blend '{}' has width {}, but {} gives {}", c.name, c.width, from, width));
        if (c.field.size() < 3) {
            error(c.loc, fmt::format("blend '{}' needs at least three layers: its last three are the heads f, g and k", c.name));
            return;
        }
        const std::vector<Block> backbone(c.field.begin(), c.field.end() - 3);
        const int b = body(backbone, width, from, false);
        const std::string b_from = backbone.empty() ? from : describe(backbone.back());
        static const char* const role[] = {"f (the rate)", "g (the start)", "k (the end)"};
        for (std::size_t i = 0; i < 3; ++i) {
            const Block& head = c.field[c.field.size() - 3 + i];
            if (head.kind != Block::Kind::dense) {
                error(c.loc, fmt::format("blend '{}': head {} must be a dense layer, not {}", c.name, role[i], describe(head)));
                continue;
            }
            const int out = dense(head.dense, b, b_from, false);
            if (width != kUnknownWidth && out != width)
                error(head.dense.loc, fmt::format("blend '{}': head {} '{}' gives {}, but the state has width {}", c.name, role[i],
                                                  head.dense.name, out, width));
        }
    }

    void update(const Stream& st, int width, const std::string& state) {
        if (st.update == Stream::Update::gated) {
            name(st.update_name, st.update_loc);
            const std::string what = fmt::format("gated layer '{}'", st.update_name);
            if (st.update_in < 1 || st.update_in > kMaxWidth)
                error(st.update_loc, fmt::format("{} has input width {}; widths must be 1 to {}", what, st.update_in, kMaxWidth));
            else if (st.update_in != model.input_size)
                error(st.update_loc, fmt::format("{} takes {} inputs, but input '{}' gives {}", what, st.update_in,
                                                 model.input_name, model.input_size));
            if (st.update_out < 1 || st.update_out > kMaxWidth)
                error(st.update_loc, fmt::format("{} has output width {}; widths must be 1 to {}", what, st.update_out, kMaxWidth));
            else if (width != kUnknownWidth && st.update_out != width)
                error(st.update_loc, fmt::format("{} gives {}, but {} has width {}", what, st.update_out, state, width));
            return;
        }
        const Dense& d = st.update_layers.front().dense;
        const std::string what = fmt::format("merge layer '{}'", d.name);
        if (width != kUnknownWidth && st.update_in != width)
            error(d.loc, fmt::format("{} reads {} state values first, but {} has width {}", what, st.update_in, state, width));
        if (st.update_obs != model.input_size)
            error(d.loc, fmt::format("{} reads {} observation values, but input '{}' gives {}", what, st.update_obs,
                                     model.input_name, model.input_size));
        dense(d, d.in, what, false);
        if (width != kUnknownWidth && d.out != width)
            error(d.loc, fmt::format("{} gives {}, but {} has width {}", what, d.out, state, width));
    }

    void run() {
        const int errors_at_start = diags.error_count();
        if (!model.name.empty()) model_name();
        if (model.input_size < 1)
            error(model.input_loc, fmt::format("input '{}' has size {}; sizes must be at least 1", model.input_name, model.input_size));
        else if (model.input_size > kMaxWidth)
            error(model.input_loc, fmt::format("input '{}' has size {}; sizes must be at most {}", model.input_name, model.input_size, kMaxWidth));
        if (model.blocks.empty() && !model.stream) error(model.loc, fmt::format("model '{}' has no layers or blocks", model.name));
        if (!model.blocks.empty() && model.blocks.back().kind == Block::Kind::dense) last_top_layer = &model.blocks.back();
        // A streaming model's readout reads the state.
        const int start = model.stream ? stream(*model.stream) : model.input_size;
        const std::string start_from = model.stream ? fmt::format("state '{}'", model.stream->state_name)
                                                    : fmt::format("input '{}'", model.input_name);
        int width = body(model.blocks, start, start_from, false);
        softmax(model.blocks);
        if (model.output_size < 1)
            error(model.output_loc, fmt::format("output '{}' has size {}; sizes must be at least 1", model.output_name, model.output_size));
        else if (model.output_size > kMaxWidth)
            error(model.output_loc, fmt::format("output '{}' has size {}; sizes must be at most {}", model.output_name, model.output_size, kMaxWidth));
        else if (width != kUnknownWidth && model.output_size != width) {
            std::string from = model.blocks.empty() ? start_from : describe(model.blocks.back());
            error(model.output_loc, fmt::format("output '{}' has size {}, but {} gives {}", model.output_name, model.output_size, from, width));
        }
        if (diags.error_count() == errors_at_start) constants_fit();
        if (total_passes_limit)
            error(total_passes_limit->solver.loc,
                  fmt::format("model '{}': its continuous blocks together need up to {} field evaluations per inference, more "
                              "than the emitted 32-bit counters hold ({}); the sum passes the limit at continuous '{}'",
                              model.name, total_field_evals, kMaxFieldEvals, total_passes_limit->name));
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
    check_vectors(model, src, diags);
    // The `learn` statement's names and ways, against the model (compiler/learn.cpp).
    if (model.learn && diags.error_count() == before) plan_learning(model, *model.learn, &src, src.path, diags);
    return diags.error_count() == before;
}

}  // namespace meander
