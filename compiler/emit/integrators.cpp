// Emit, integrators: each continuous block's field and its Runge-Kutta loop,
// unrolled from the tableau table. Every choice mirrors runtime/integrate.cpp
// step for step (same order of operations where it matters for accept/reject
// decisions), so the counters of emitted code equal the reference
// evaluator's in double mode.
#include <fmt/format.h>

#include "../format.hpp"
#include "render.hpp"

namespace meander::emit_detail {

namespace {

bool blocks_use_time(const std::vector<Block>& blocks) {
    bool uses = false;
    for_each_dense(blocks, [&](const Dense& d) { uses = uses || d.time_input; });
    return uses;
}

std::string coef_comment(const Coefficient& c) { return std::string(c.text); }

// "c * k1[j] + d * k2[j]" over the non-zero weights w[offset .. offset+count).
std::string weighted_sum(const std::vector<std::string>& names, const std::vector<bool>& nonzero) {
    std::string s;
    for (std::size_t j = 0; j < names.size(); ++j) {
        if (!nonzero[j]) continue;
        if (!s.empty()) s += " + ";
        s += fmt::format("{} * k{}[j]", names[j], j + 1);
    }
    return s;
}

template <class Stages, class Call>
void adaptive_body(const Emission& e, std::string& o, const ContinuousPlan& cp, Stages& stages, Call& call,
                   const std::vector<std::string>& bnames, const std::vector<bool>& bnz,
                   const std::vector<std::string>& enames, const std::vector<bool>& enz) {
    const Continuous& c = *cp.block;
    const SolverSpec& sp = c.solver;
    const Tableau& tb = *cp.tableau;
    const std::size_t s = static_cast<std::size_t>(tb.stages);
    const int q = tb.embedded_order;
    const bool forward = c.t1 > c.t0;
    const bool pi = sp.controller == Controller::pi;
    const std::string plus = forward ? "+" : "-";

    o += fmt::format("    constexpr real rtol = {};\n", e.L(sp.rtol));
    o += fmt::format("    constexpr real atol = {};\n", e.L(sp.atol));
    o += fmt::format("    constexpr std::uint32_t max_steps = {}u;  // attempted steps\n", sp.max_steps);
    o += fmt::format("    constexpr real n_real = {};  // rms norms divide by n, as eval does\n",
                     e.L(static_cast<double>(cp.n)));
    o += fmt::format("    constexpr real safety = {};\n", e.L(sp.safety));
    o += fmt::format("    constexpr real min_factor = {};\n", e.L(sp.min_factor));
    o += fmt::format("    constexpr real max_factor = {};\n", e.L(sp.max_factor));
    o += fmt::format("    constexpr real exponent = {};  // -1/(q+1), q = {}\n", e.L(-1.0 / (q + 1)), q);
    if (pi) {
        o += fmt::format("    constexpr real pi_err_exp = {};  // -pi-alpha/(q+1)\n",
                         e.L(-sp.pi_alpha / static_cast<double>(q + 1)));
        o += fmt::format("    constexpr real pi_prev_exp = {};  // pi-beta/(q+1)\n",
                         e.L(sp.pi_beta / static_cast<double>(q + 1)));
    }
    o += "    real t = t0;\n";
    o += "    " + call("t", "y", "k1") + "\n";
    if (sp.first_step > 0.0) {
        o += fmt::format("    real h_abs = {};  // first-step\n", e.L(sp.first_step));
    } else {
        o += "    real h_abs;\n";
        o += "    {\n";
        o += "        // Initial step: HNW I, II.4 (SciPy 1.10 select_initial_step).\n";
        o += fmt::format("        real s0 = {0};\n        real s1 = {0};\n", e.L(0));
        o += "        for (std::size_t j = 0; j < n; ++j) {\n";
        o += "            const real sc = std::fabs(y[j]) * rtol + atol;\n";
        o += "            const real q0 = y[j] / sc;\n";
        o += "            const real q1 = k1[j] / sc;\n";
        o += "            s0 += q0 * q0;\n            s1 += q1 * q1;\n        }\n";
        o += "        const real d0 = std::sqrt(s0 / n_real);\n";
        o += "        const real d1 = std::sqrt(s1 / n_real);\n";
        o += fmt::format("        const real h0 = (d0 < {0} || d1 < {0}) ? {1} : {2} * d0 / d1;\n", e.L(1e-5),
                         e.L(1e-6), e.L(0.01));
        o += fmt::format("        for (std::size_t j = 0; j < n; ++j) arg[j] = y[j] {} h0 * k1[j];\n", plus);
        o += "        " + call("t " + plus + " h0", "arg", "k2") + "\n";
        o += fmt::format("        real s2 = {};\n", e.L(0));
        o += "        for (std::size_t j = 0; j < n; ++j) {\n";
        o += "            const real q2 = (k2[j] - k1[j]) / (std::fabs(y[j]) * rtol + atol);\n";
        o += "            s2 += q2 * q2;\n        }\n";
        o += "        const real d2 = std::sqrt(s2 / n_real) / h0;\n";
        o += "        const real dmax = d1 < d2 ? d2 : d1;\n";
        o += fmt::format("        const real h1 = (d1 <= {0} && d2 <= {0})\n", e.L(1e-15));
        o += fmt::format("                            ? ({0} < h0 * {1} ? h0 * {1} : {0})\n", e.L(1e-6), e.L(1e-3));
        o += fmt::format("                            : {}({} / dmax, {});\n", e.math("pow"), e.L(0.01), e.L(1.0 / (q + 1)));
        o += fmt::format("        h_abs = h1 < {0} * h0 ? h1 : {0} * h0;\n", e.L(100));
        o += "    }\n";
    }
    if (pi) o += fmt::format("    real err_prev = {};\n", e.L(1e-4));
    o += "    std::uint32_t attempts = 0u;\n";
    // t never passes t1 (the last step is clipped to it), so an ordered
    // comparison says "not there yet" without float equality (-Wfloat-equal).
    const std::string not_there = forward ? "t < t1" : "t > t1";
    o += "    while (" + not_there + ") {\n";
    o += "        // nextafter toward t1 is nextafter toward the direction of integration (t != t1).\n";
    o += fmt::format("        const real min_step = {} * std::fabs({}(t, t1) - t);\n", e.L(10), e.math("nextafter"));
    o += "        if (h_abs < min_step) h_abs = min_step;  // as SciPy: only rejections end in step_too_small\n";
    o += "        bool rejected = false;\n";
    o += "        for (;;) {\n";
    o += "            if (attempts == max_steps) return result::step_limit;\n";
    o += "            if (h_abs < min_step) return result::step_too_small;\n";
    o += fmt::format("            real t_new = t {} h_abs;\n", plus);
    o += fmt::format("            if (t_new {} t1) t_new = t1;\n", forward ? ">" : "<");
    o += "            const real h = t_new - t;\n";
    o += "            h_abs = std::fabs(h);\n";
    o += stages("            ", "t_new", "y_new");
    if (!tb.fsal)
        o += fmt::format("            for (std::size_t j = 0; j < n; ++j) y_new[j] = y[j] + h * ({});\n",
                         weighted_sum(bnames, bnz));
    o += fmt::format("            real sum = {};\n", e.L(0));
    o += "            for (std::size_t j = 0; j < n; ++j) {\n";
    o += fmt::format("                const real e = h * ({});\n", weighted_sum(enames, enz));
    o += "                const real ay = std::fabs(y[j]);\n";
    o += "                const real ay_new = std::fabs(y_new[j]);\n";
    o += "                const real q = e / (atol + rtol * (ay < ay_new ? ay_new : ay));\n";
    o += "                sum += q * q;\n";
    o += "            }\n";
    o += "            const real err = std::sqrt(sum / n_real);\n";
    o += "            ++attempts;\n";
    o += fmt::format("            if (!(err < {})) {{  // reject (a NaN error too: it shrinks by min-factor)\n",
                     e.L(1));
    o += fmt::format("                const real shrink = safety * {}(err, exponent);\n", e.math("pow"));
    o += "                h_abs *= shrink > min_factor ? shrink : min_factor;\n";
    o += "                ++count.steps_rejected;\n";
    o += "                rejected = true;\n";
    o += "                continue;\n";
    o += "            }\n";
    o += "            real factor = max_factor;\n";
    if (!pi) {
        o += fmt::format("            if (err > {}) {{\n", e.L(0));  // err >= 0 here
        o += fmt::format("                const real grow = safety * {}(err, exponent);\n", e.math("pow"));
        o += "                factor = grow < max_factor ? grow : max_factor;\n";
        o += "            }\n";
    } else {
        o += fmt::format("            if (err > {}) {{\n", e.L(0));  // err >= 0 here
        o += fmt::format("                factor = safety * {0}(err, pi_err_exp) * {0}(err_prev, pi_prev_exp);\n", e.math("pow"));
        o += "                factor = factor < min_factor ? min_factor : (max_factor < factor ? max_factor : factor);\n";
        o += "            }\n";
        o += fmt::format("            err_prev = err < {0} ? {0} : err;\n", e.L(1e-4));
    }
    o += fmt::format("            if (rejected && !(factor < {0})) factor = {0};\n", e.L(1));
    o += "            h_abs *= factor;\n";
    o += "            ++count.steps_accepted;\n";
    o += "            t = t_new;\n";
    o += "            for (std::size_t j = 0; j < n; ++j) y[j] = y_new[j];\n";
    o += "            if (!all_finite(y, n)) return result::state_not_finite;\n";
    if (tb.fsal)
        o += fmt::format("            for (std::size_t j = 0; j < n; ++j) k1[j] = k{}[j];  // FSAL\n", s);
    else  // the next step's first stage; none after the last step
        o += "            if (" + not_there + ") " + call("t", "y", "k1") + "\n";
    o += "            break;\n";
    o += "        }\n";
    o += "    }\n";
}

// Over a gap, a fixed-step method takes ceil(rate * gap) steps, as eval does
// (runtime/stream.cpp gap_steps), clamped to the count at the largest gap so that
// worst_field_evals bounds every call, and without the C library's ceil: below the
// clamp the product converts exactly to its integer part, one more when it is not
// whole. float64: eval's rounded product, so eval's count. float32: eval widens the
// float gap to double, where the product with a rate that is a float is exact; the
// float product p is rounded, so its rounding error e comes from Dekker's product
// (Veltkamp's split, no FMA: exact with rounding to nearest), and a whole p with
// e > 0 takes one step more. (A rate that is not a float: the float product's ceil.)
std::string gap_step_count(const Emission& e, const ContinuousPlan& cp) {
    const double rate = cp.block->solver.steps_per_unit;
    const long most = cp.tableau->stages > 0 ? cp.worst_field_evals / cp.tableau->stages : 0;
    const bool exact = e.p == Precision::float32 && static_cast<double>(static_cast<float>(rate)) == rate;
    std::string o;
    o += fmt::format("    // ceil(gap * {}) steps, at most {} (at the largest gap)\n", format_double(rate), most);
    o += fmt::format("    constexpr real rate = {};\n", e.L(rate));
    o += "    const real p = gap * rate;\n";
    if (exact) {
        o += "    // gap * rate = p + err exactly (Dekker 1971; Veltkamp's split with 2^12 + 1)\n";
        o += fmt::format("    const real gs = {} * gap;\n    const real g_hi = gs - (gs - gap);\n    const real g_lo = gap - g_hi;\n", e.L(4097));
        o += fmt::format("    const real rs = {} * rate;\n    const real r_hi = rs - (rs - rate);\n    const real r_lo = rate - r_hi;\n", e.L(4097));
        o += "    const real err = ((g_hi * r_hi - p) + g_hi * r_lo + g_lo * r_hi) + g_lo * r_lo;\n";
    }
    o += fmt::format("    std::uint32_t steps = {}u;\n", most);
    o += fmt::format("    if (!(p >= {})) {{\n        steps = 1u;  // the exact product is below 1 too\n", e.L(1));
    o += fmt::format("    }} else if (p <= {}) {{\n", e.L(static_cast<double>(most)));
    o += "        steps = static_cast<std::uint32_t>(p);\n";
    o += fmt::format("        if (static_cast<real>(steps) < p{}) steps += 1u;\n", exact ? fmt::format(" || err > {}", e.L(0)) : "");
    o += fmt::format("        if (steps > {0}u) steps = {0}u;\n", most);
    o += "    }\n";
    return o;
}

}  // namespace

std::string render_continuous(const Emission& e, const ContinuousPlan& cp) {
    const Continuous& c = *cp.block;
    // check_model rejects unknown methods; should one get here, the output must not build.
    if (cp.tableau == nullptr)
        return fmt::format("#error \"continuous {}: unknown solver method '{}'\"\n\n", c.name, c.solver.method);
    const Tableau& tb = *cp.tableau;
    const std::string name = c.name;
    const std::size_t s = static_cast<std::size_t>(tb.stages);
    const bool field_work = chain_uses_work(cp.field);
    const bool field_time = blocks_use_time(c.field);
    std::string o;

    // The field.
    o += fmt::format("// The field of {}: dx = f(x, t); one call is one field evaluation.\n", name);
    o += fmt::format("void field_{}({}real {}, const real* x, real* dx, counters& count) noexcept {{\n", name,
                     field_work ? "real* work, " : "", field_time ? "t" : "/*t*/");
    o += "    ++count.field_evals;\n";
    render_chain(e, o, cp.field, "x", "dx", "    ", false);
    o += "}\n\n";
    auto call = [&](const std::string& t, const std::string& x, const std::string& dx) {
        return fmt::format("field_{}({}{}, {}, {}, count);", name, field_work ? "work, " : "", t, x, dx);
    };

    o += fmt::format("// continuous {}: {} ({}), state {} = {} + augment {}, t from {} to {}\n", name, tb.title,
                     tb.key, cp.n, c.width, c.augment, format_double(c.t0), format_double(c.t1));
    // A streaming model's evolution runs over [0, gap], the gap an argument (observe calls it with gap > 0).
    o += fmt::format("result block_{}(real* work, const real* in, real* out, {}counters& count) noexcept {{\n", name,
                     cp.over_gap ? "real gap, " : "");
    o += fmt::format("    constexpr std::size_t n = {};\n", cp.n);
    o += fmt::format("    real* const y = work + {};\n", cp.y);
    for (std::size_t i = 0; i < s; ++i) o += fmt::format("    real* const k{} = work + {};\n", i + 1, cp.k[i]);
    // arg holds stage arguments, the automatic first step's Euler step and,
    // for an FSAL tableau run with fixed steps, the new state.
    bool arg_used = (cp.adaptive && c.solver.first_step <= 0.0) || (!cp.adaptive && tb.fsal && s > 1);
    for (std::size_t i = 1; i < s; ++i)
        for (std::size_t j = 0; j < i && !(tb.fsal && i == s - 1); ++j)
            arg_used = arg_used || tb.a_at(static_cast<int>(i), static_cast<int>(j)) != 0.0;
    if (arg_used) o += fmt::format("    real* const arg = work + {};\n", cp.arg);
    if (cp.adaptive) o += fmt::format("    real* const y_new = work + {};\n", cp.y_new);
    o += fmt::format("    constexpr real t0 = {};\n", e.L(c.t0));
    if (cp.adaptive && cp.over_gap)
        o += "    const real t1 = gap;\n";
    else if (cp.adaptive)
        o += fmt::format("    constexpr real t1 = {};\n", e.L(c.t1));

    // Coefficients, exactly as runtime/tableau.hpp holds them.
    std::vector<std::string> bnames(s), enames(s);
    std::vector<bool> bnz(s), enz(s);
    o += fmt::format("    // {} coefficients ({}); zero entries are left out\n", tb.title, tb.source);
    for (std::size_t i = 1; i < s; ++i) {
        const bool last_fsal = tb.fsal && i == s - 1;
        // An FSAL method's last stage sits at t_new = t + h: no c needed.
        if (!last_fsal)
            o += fmt::format("    constexpr real c{} = {};  // {}\n", i + 1, e.L(tb.c[i].value), coef_comment(tb.c[i]));
        if (last_fsal) continue;  // the last row of A is b
        for (std::size_t j = 0; j < i; ++j) {
            const Coefficient& a = tb.a_coef(static_cast<int>(i), static_cast<int>(j));
            if (a.value != 0.0)
                o += fmt::format("    constexpr real a{}{} = {};  // {}\n", i + 1, j + 1, e.L(a.value),
                                 coef_comment(a));
        }
    }
    for (std::size_t i = 0; i < s; ++i) {
        bnames[i] = fmt::format("b{}", i + 1);
        bnz[i] = tb.b[i].value != 0.0;
        if (bnz[i])
            o += fmt::format("    constexpr real b{} = {};  // {}\n", i + 1, e.L(tb.b[i].value), coef_comment(tb.b[i]));
    }
    if (cp.adaptive) {
        for (std::size_t i = 0; i < s; ++i) {
            enames[i] = fmt::format("e{}", i + 1);
            enz[i] = tb.e[i].value != 0.0;
            if (enz[i])
                o += fmt::format("    constexpr real e{} = {};  // {} (b - b_hat)\n", i + 1, e.L(tb.e[i].value),
                                 coef_comment(tb.e[i]));
        }
    }
    o += fmt::format("    for (std::size_t i = 0; i < {}; ++i) y[i] = in[i];\n", c.width);
    if (c.augment > 0)
        o += fmt::format("    for (std::size_t i = {}; i < n; ++i) y[i] = {};  // augmented dimensions\n", c.width,
                         e.L(0));

    // Stages 2..s of one step from (t, y), k1 filled. Mirrors rk_step in
    // runtime/integrate.cpp: an FSAL method's last stage is f(t_new, y_new).
    auto stages = [&](const std::string& pad, const std::string& t_new, const std::string& y_new_buf) {
        std::string st;
        for (std::size_t i = 1; i < s; ++i) {
            const bool last_fsal = tb.fsal && i == s - 1;
            if (last_fsal) {
                std::vector<std::string> names(bnames.begin(), bnames.begin() + static_cast<long>(s - 1));
                std::vector<bool> nz(bnz.begin(), bnz.begin() + static_cast<long>(s - 1));
                st += fmt::format("{}for (std::size_t j = 0; j < n; ++j) {}[j] = y[j] + h * ({});\n", pad,
                                  y_new_buf, weighted_sum(names, nz));
                st += fmt::format("{}{}\n", pad, call(t_new, y_new_buf, fmt::format("k{}", s)));
                continue;
            }
            std::vector<std::string> names;
            std::vector<bool> nz;
            for (std::size_t j = 0; j < i; ++j) {
                names.push_back(fmt::format("a{}{}", i + 1, j + 1));
                nz.push_back(tb.a_at(static_cast<int>(i), static_cast<int>(j)) != 0.0);
            }
            const std::string sum = weighted_sum(names, nz);
            std::string x = "arg";
            if (sum.empty())
                x = "y";  // y + h*0 is y
            else
                st += fmt::format("{}for (std::size_t j = 0; j < n; ++j) arg[j] = y[j] + h * ({});\n", pad, sum);
            st += fmt::format("{}{}\n", pad, call(fmt::format("t + c{} * h", i + 1), x, fmt::format("k{}", i + 1)));
        }
        return st;
    };

    if (!cp.adaptive) {
        if (cp.over_gap) {
            o += gap_step_count(e, cp);
            o += "    const real h = gap / static_cast<real>(steps);  // (t1 - t0) / steps, t0 = 0\n";
        } else {
            const int N = c.solver.steps;
            o += fmt::format("    constexpr std::uint32_t steps = {}u;\n", N);
            o += fmt::format("    constexpr real h = {};  // (t1 - t0) / {}\n", e.L((c.t1 - c.t0) / N), N);
        }
        o += "    for (std::uint32_t i = 0; i < steps; ++i) {\n";
        o += "        // From the index, never accumulated: no drift over many steps.\n";
        o += "        const real t = t0 + static_cast<real>(i) * h;\n";
        o += "        " + call("t", "y", "k1") + "\n";
        o += stages("        ", "t + h", "arg");
        if (tb.fsal && s > 1)
            o += "        for (std::size_t j = 0; j < n; ++j) y[j] = arg[j];\n";
        else
            o += fmt::format("        for (std::size_t j = 0; j < n; ++j) y[j] = y[j] + h * ({});\n",
                             weighted_sum(bnames, bnz));
        o += "        ++count.steps_accepted;\n";
        o += "        if (!all_finite(y, n)) return result::state_not_finite;\n";
        o += "    }\n";
    } else {
        adaptive_body(e, o, cp, stages, call, bnames, bnz, enames, enz);
    }
    o += "    for (std::size_t i = 0; i < n; ++i) out[i] = y[i];\n";
    o += "    return result::ok;\n}\n\n";
    return o;
}

}  // namespace meander::emit_detail
