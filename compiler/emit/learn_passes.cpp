// Emit, learning on the device: the forward pass that keeps what the reverse pass
// needs, and the reverse pass (learn_render.hpp).
#include <fmt/format.h>

#include <algorithm>

#include "../../runtime/integrate.hpp"
#include "../format.hpp"
#include "learn_render.hpp"

namespace meander::emit_detail::learning {

// ---- dense kernels -------------------------------------------------------------------

RowAddr row_addr(const Dense& d, bool learnable) {
    const int C = d.in_total();
    const int R = kDenseBlockRows;
    if (learnable) return {fmt::format("W + r * {}", C), "1"};
    const int blocked = d.out / R * R;
    const int rest = d.out - blocked;
    if (blocked == 0) return {"W + r", fmt::format("{}", rest)};
    if (rest == 0) return {fmt::format("W + r / {0} * {1} + r % {0}", R, R * C), fmt::format("{}", R)};
    return {fmt::format("(r < {2} ? W + r / {0} * {1} + r % {0} : W + {3} + (r - {2}))", R, R * C, blocked, blocked * C),
            fmt::format("(r < {} ? {} : {})", blocked, R, rest)};
}

std::string LearnRender::render_dense_forward(const Dense& d) {
    const LearnLayer* l = plan_.find(d);
    const RowAddr ra = row_addr(d, l && l->weight);
    std::string o;
    o += fmt::format("// {}: z = W x{} + b, y = {}(z), recorded for the reverse pass\n", d.name,
                     d.time_input ? " (t last)" : "", activation_name(d.act));
    o += fmt::format("void lfwd_{}(const real* W, {}const real* x, {}real* z, real* y) noexcept {{\n", d.name,
                     d.has_bias ? "const real* B, " : "", d.time_input ? "real t, " : "");
    o += fmt::format("    for (std::size_t r = 0; r < {}; ++r) {{\n", d.out);
    o += fmt::format("        const real* const wr = {};\n", ra.base);
    o += fmt::format("        const std::size_t s = {};\n", ra.step);
    o += fmt::format("        real acc = {};\n", L(0));
    o += fmt::format("        for (std::size_t c = 0; c < {}; ++c) acc += wr[c * s] * x[c];\n", d.in);
    if (d.time_input) o += fmt::format("        acc += wr[{} * s] * t;\n", d.in);
    if (d.has_bias) o += "        acc += B[r];\n";
    o += "        z[r] = acc;\n";
    o += fmt::format("        y[r] = {};\n", apply_activation(e_, d, "acc"));
    o += "    }\n";
    if (d.act == Activation::softmax) {
        o += "    real top = y[0];\n";
        o += fmt::format("    for (std::size_t r = 1; r < {}; ++r)\n        if (y[r] > top) top = y[r];\n", d.out);
        o += fmt::format("    real sum = {};\n", L(0));
        o += fmt::format("    for (std::size_t r = 0; r < {}; ++r) {{\n", d.out);
        o += fmt::format("        y[r] = {}(y[r] - top);\n        sum += y[r];\n    }}\n", e_.math("exp"));
        o += fmt::format("    for (std::size_t r = 0; r < {}; ++r) y[r] = y[r] / sum;\n", d.out);
    }
    o += "}\n\n";
    return o;
}

std::string derivative_call(const Emission& e, const Dense& d, const std::string& z, const std::string& y) {
    switch (d.act) {
    case Activation::identity:
    case Activation::softmax: return "";
    case Activation::leaky_relu: return fmt::format("dact_leaky_relu({}, {}, {})", z, y, e.L(d.act_param));
    case Activation::elu: return fmt::format("dact_elu({}, {}, {})", z, y, e.L(d.act_param));
    default: break;
    }
    return fmt::format("dact_{}({}, {})", activation_name(d.act), z, y);
}

std::string LearnRender::render_dense_backward(const Dense& d) {
    const LearnLayer* l = plan_.find(d);
    const bool lw = l && l->weight, lb = l && l->bias;
    const RowAddr ra = row_addr(d, lw);
    const int C = d.in_total();
    std::string o;
    // dL/dz from dL/dy (runtime/vjp.cpp dense_backward).
    o += fmt::format("// {}: dL/dz from dL/dy\n", d.name);
    o += fmt::format("void lgz_{}(const real* {}, const real* {}, const real* ybar, real* gz) noexcept {{\n", d.name,
                     d.act == Activation::identity || d.act == Activation::softmax ? "/*z*/ " : "z",
                     d.act == Activation::identity ? "/*y*/" : "y");
    if (d.act == Activation::softmax) {
        o += "    // y_i = e_i / sum e: dL/dz_i = y_i (ybar_i - ybar . y)\n";
        o += fmt::format("    real dot = {};\n", L(0));
        o += fmt::format("    for (std::size_t r = 0; r < {}; ++r) dot += ybar[r] * y[r];\n", d.out);
        o += fmt::format("    for (std::size_t r = 0; r < {}; ++r) gz[r] = y[r] * (ybar[r] - dot);\n", d.out);
    } else if (d.act == Activation::identity) {
        o += fmt::format("    for (std::size_t r = 0; r < {}; ++r) gz[r] = ybar[r];\n", d.out);
    } else {
        o += fmt::format("    for (std::size_t r = 0; r < {}; ++r) gz[r] = ybar[r] * {};\n", d.out,
                         derivative_call(e_, d, "z[r]", "y[r]"));
    }
    o += "}\n\n";
    // dL/dW, dL/db added; dL/dx = W^T dL/dz (over the input columns, not t).
    o += fmt::format("// {}: dL/dW{} added, dL/dx = W^T dL/dz when xbar is given\n", d.name, lb ? " and dL/db" : "");
    o += fmt::format("void lbwd_{}(const real* W, const real* {}, {}const real* gz, real* xbar{}{}) noexcept {{\n",
                     d.name, lw ? "x" : "/*x*/", d.time_input && lw ? "real t, " : (d.time_input ? "real /*t*/, " : ""),
                     lw ? ", real* gW" : "", lb ? ", real* gB" : "");
    if (lw) {
        o += fmt::format("    for (std::size_t r = 0; r < {}; ++r) {{\n", d.out);
        o += fmt::format("        for (std::size_t c = 0; c < {}; ++c) gW[r * {} + c] += gz[r] * x[c];\n", d.in, C);
        if (d.time_input) o += fmt::format("        gW[r * {} + {}] += t * gz[r];\n", C, d.in);
        o += "    }\n";
    }
    if (lb) o += fmt::format("    for (std::size_t r = 0; r < {}; ++r) gB[r] += gz[r];\n", d.out);
    o += "    if (xbar == nullptr) return;\n";
    o += fmt::format("    for (std::size_t c = 0; c < {}; ++c) xbar[c] = {};\n", d.in, L(0));
    o += fmt::format("    for (std::size_t r = 0; r < {}; ++r) {{\n", d.out);
    o += fmt::format("        const real* const wr = {};\n", ra.base);
    o += fmt::format("        const std::size_t s = {};\n", ra.step);
    o += fmt::format("        for (std::size_t c = 0; c < {}; ++c) xbar[c] += wr[c * s] * gz[r];\n", d.in);
    o += "    }\n";
    o += "}\n\n";
    return o;
}

// Only the derivatives that `uses` (the rest of the learning code) calls: the
// layers before the first learnable one are never differentiated, and clang
// warns of an unused function (an error in the warnings builds).
std::string LearnRender::render_derivatives(const std::string& uses) {
    std::set<Activation> used;
    for_each_dense(e_.model.blocks, [&](const Dense& d) {
        // The function's name: the activation's, '-' as '_' (leaky-relu: dact_leaky_relu).
        std::string name(activation_name(d.act));
        std::replace(name.begin(), name.end(), '-', '_');
        if (uses.find("dact_" + name + "(") != std::string::npos) used.insert(d.act);
    });
    std::string o = "// Derivatives of the activations, given z and y = act(z) (runtime/vjp.cpp).\n";
    const std::string one = L(1), zero = L(0), half = L(0.5);
    for (Activation a : used) {
        switch (a) {
        case Activation::identity:
        case Activation::softmax: break;
        case Activation::relu:
            o += fmt::format("inline real dact_relu(real z, real /*y*/) noexcept {{ return z > {} ? {} : {}; }}\n", zero,
                             one, zero);
            break;
        case Activation::leaky_relu:
            o += fmt::format("inline real dact_leaky_relu(real z, real /*y*/, real slope) noexcept {{ return z >= {} ? "
                             "{} : slope; }}\n",
                             zero, one);
            break;
        case Activation::tanh:
            o += fmt::format("inline real dact_tanh(real /*z*/, real y) noexcept {{ return {} - y * y; }}\n", one);
            break;
        case Activation::sigmoid:
            o += fmt::format("inline real dact_sigmoid(real /*z*/, real y) noexcept {{ return y * ({} - y); }}\n", one);
            break;
        case Activation::softplus:
            o += "inline real dact_softplus(real z, real /*y*/) noexcept { return act_sigmoid(z); }\n";
            break;
        case Activation::silu:
            o += fmt::format("inline real dact_silu(real z, real /*y*/) noexcept {{\n"
                             "    const real s = act_sigmoid(z);\n"
                             "    return s * ({} + z * ({} - s));\n}}\n",
                             one, one);
            break;
        case Activation::gelu:
            // The tanh form's derivative, as runtime/vjp.cpp writes it.
            o += fmt::format("inline real dact_gelu(real z, real /*y*/) noexcept {{\n"
                             "    const real k = {};  // sqrt(2/pi)\n"
                             "    const real th = act_tanh(k * (z + {} * z * z * z));\n"
                             "    return {} * ({} + th) + {} * z * ({} - th * th) * k * ({} + {} * z * z);\n}}\n",
                             L(0.7978845608028654), L(0.044715), half, one, half, one, one, L(3.0 * 0.044715));
            break;
        case Activation::elu:
            o += fmt::format("inline real dact_elu(real z, real /*y*/, real alpha) noexcept {{ return z > {} ? {} : "
                             "alpha * {}(z); }}\n",
                             zero, one, e_.math("exp"));
            break;
        }
    }
    return o + "\n";
}

std::string LearnRender::render_dense_kernels() {
    std::string o;
    // Only the layers the learning passes run: the region's, through bodies and fields.
    std::vector<const Dense*> layers;
    for (std::size_t i = plan_.first_block; i < e_.model.blocks.size(); ++i) {
        const Block& b = e_.model.blocks[i];
        switch (b.kind) {
        case Block::Kind::dense: layers.push_back(&b.dense); break;
        case Block::Kind::residual: for_each_dense(b.residual.body, [&](const Dense& d) { layers.push_back(&d); }); break;
        case Block::Kind::continuous:
            for_each_dense(b.continuous.field, [&](const Dense& d) { layers.push_back(&d); });
            break;
        }
    }
    for (const Dense* d : layers) o += render_dense_forward(*d) + render_dense_backward(*d);
    return o;
}

// ---- chains ----------------------------------------------------------------------------

void LearnRender::fwd_chain(std::string& o, const LChain& c, const std::string& t, const std::string& pad, bool top) {
    for (const LNode& nd : c.nodes) {
        const Block& b = *nd.b;
        switch (b.kind) {
        case Block::Kind::dense: {
            const Dense& d = b.dense;
            o += fmt::format("{}lfwd_{}({}, {}{}, {}{}, {});\n", pad, d.name, weight_ptr(d),
                             d.has_bias ? bias_ptr(d) + ", " : "", nd.x, d.time_input ? t + ", " : "", W(nd.z), W(nd.y));
            break;
        }
        case Block::Kind::residual: {
            o += fmt::format("{}// residual {}: y = x + g(x)\n", pad, b.residual.name);
            fwd_chain(o, nd.body, t, pad, false);
            const std::string g = nd.body.nodes.empty() ? nd.x : W(nd.body.nodes.back().y);
            o += fmt::format("{}for (std::size_t i = 0; i < {}; ++i) w[{} + i] = ({})[i] + ({})[i];\n", pad, nd.out, nd.y,
                             g, nd.x);
            break;
        }
        case Block::Kind::continuous: fwd_continuous(o, nd, pad); break;
        }
        if (top)
            o += fmt::format("{}if (!all_finite({}, {})) return learn_result::state_not_finite;\n", pad, W(nd.y), nd.out);
    }
}

void LearnRender::bwd_chain(std::string& o, const LChain& c, const std::string& ybar, const std::string& xbar,
                            const std::string& g, std::size_t base, const std::string& t, const std::string& pad,
                            bool top) {
    std::string cur = ybar;
    int flip = 0;
    for (std::size_t i = c.nodes.size(); i-- > 0;) {
        const LNode& nd = c.nodes[i];
        const Block& b = *nd.b;
        std::string dst = i == 0 ? xbar : W(c.bar[flip]);
        if (i > 0 && dst == cur) dst = W(c.bar[flip ^ 1]);
        switch (b.kind) {
        case Block::Kind::dense: {
            const Dense& d = b.dense;
            const LearnLayer* l = plan_.find(d);
            const bool head_fused = top && i + 1 == c.nodes.size() && plan_.loss == LearnLoss::cross_entropy;
            if (head_fused)
                o += fmt::format("{0}if (head_gz) {{\n{0}    for (std::size_t r = 0; r < {1}; ++r) w[{2} + r] = ({3})[r];\n"
                                 "{0}}} else {{\n{0}    lgz_{4}({5}, {6}, {3}, {7});\n{0}}}\n",
                                 pad, d.out, gz_, cur, d.name, W(nd.z), W(nd.y), W(gz_));
            else
                o += fmt::format("{}lgz_{}({}, {}, {}, {});\n", pad, d.name, W(nd.z), W(nd.y), cur, W(gz_));
            std::string args = fmt::format("{}, {}, ", weight_ptr(d), nd.x);
            if (d.time_input) args += t + ", ";
            args += fmt::format("{}, {}", W(gz_), dst.empty() ? "nullptr" : dst);
            if (l && l->weight) args += ", " + grad_ptr(d, true, g, base);
            if (l && l->bias) args += ", " + grad_ptr(d, false, g, base);
            o += fmt::format("{}lbwd_{}({});\n", pad, d.name, args);
            break;
        }
        case Block::Kind::residual: {
            o += fmt::format("{}// residual {}: dL/dx = dL/dy + dL/dg's input\n", pad, b.residual.name);
            bwd_chain(o, nd.body, cur, W(nd.gbar), g, base, t, pad, false);
            if (!dst.empty())
                o += fmt::format("{}for (std::size_t i = 0; i < {}; ++i) ({})[i] = ({})[i] + w[{} + i];\n", pad, nd.in,
                                 dst, cur, nd.gbar);
            break;
        }
        case Block::Kind::continuous: bwd_continuous(o, nd, cur, dst, pad); break;
        }
        if (dst.empty()) break;
        cur = dst;
        flip ^= 1;
    }
}

// ---- continuous blocks ------------------------------------------------------------------

std::string LearnRender::render_fields() {
    std::string o;
    for (const LNode& nd : region_.nodes) {
        if (nd.b->kind != Block::Kind::continuous) continue;
        const Continuous& c = nd.b->continuous;
        bool uses_t = false;
        for_each_dense(c.field, [&](const Dense& d) { uses_t = uses_t || d.time_input; });
        const std::string tp = uses_t ? "real t" : "real /*t*/";
        const std::string out_y = nd.body.nodes.empty() ? "x" : W(nd.body.nodes.back().y);
        o += fmt::format("// The field of {}, recorded: dx = f(x, t).\n", c.name);
        o += fmt::format("void lfield_{}(const parameters& p, real* w, {}, const real* x, real* dx, counters& count) "
                         "noexcept {{\n",
                         c.name, tp);
        o += "    static_cast<void>(p);\n";
        o += "    ++count.field_evals;\n";
        fwd_chain(o, nd.body, "t", "    ", false);
        o += fmt::format("    for (std::size_t i = 0; i < {}; ++i) dx[i] = ({})[i];\n}}\n\n", nd.n, out_y);
        o += fmt::format("// a^T df/dx into xbar and a^T df/dtheta added into g (the field's learnable values),\n"
                         "// at (x, t), from one recorded evaluation; value gets f(x, t) when given.\n");
        o += fmt::format("void lvjp_{}(const parameters& p, real* w, {}, const real* x, const real* a, real* xbar, "
                         "real* g, real* value, counters& count) noexcept {{\n",
                         c.name, tp);
        o += "    static_cast<void>(g);\n";
        o += fmt::format("    lfield_{}(p, w, {}, x, value != nullptr ? value : w + {}, count);\n", c.name,
                         uses_t ? "t" : L(0), nd.body.bar[0]);
        bwd_chain(o, nd.body, "a", "xbar", "g", nd.fbase, "t", "    ", false);
        o += "}\n\n";
    }
    return o;
}

// Sums y + h * (w_1 k_1 + ...) over the non-zero weights, as runtime/integrate.cpp.
std::string rk_sum(const std::vector<std::pair<std::string, std::string>>& terms) {
    std::string s;
    for (const auto& [wgt, k] : terms) {
        if (!s.empty()) s += " + ";
        s += wgt + " * " + k;
    }
    return s;
}

void LearnRender::fwd_continuous(std::string& o, const LNode& nd, const std::string& pad) {
    const Continuous& c = nd.b->continuous;
    const Tableau& tb = *find_tableau(c.solver.method);
    const std::size_t s = static_cast<std::size_t>(tb.stages);
    const std::size_t n = nd.n;
    const bool steps = plan_.way == LearnSpec::Way::steps;
    const std::string P = pad + "    ";
    o += fmt::format("{}{{  // continuous {}: {} ({}), {} steps{}\n", pad, c.name, tb.title, tb.key, c.solver.steps,
                     steps ? ", the state kept at the start of every step" : "");
    o += fmt::format("{}real* const y = w + {};\n", P, nd.y);
    o += fmt::format("{}for (std::size_t i = 0; i < {}; ++i) y[i] = ({})[i];\n", P, c.width, nd.x);
    if (c.augment > 0) o += fmt::format("{}for (std::size_t i = {}; i < {}; ++i) y[i] = {};\n", P, c.width, n, L(0));
    o += fmt::format("{}const real h = {};\n", P, L((c.t1 - c.t0) / c.solver.steps));
    o += fmt::format("{}for (std::uint32_t m = 0; m < {}u; ++m) {{\n", P, c.solver.steps);
    const std::string Q = P + "    ";
    o += fmt::format("{}const real t = {} + static_cast<real>(m) * h;\n", Q, L(c.t0));
    if (steps) o += fmt::format("{}for (std::size_t i = 0; i < {}; ++i) w[{} + m * {} + i] = y[i];\n", Q, n, nd.states, n);
    for (std::size_t i = 0; i < s; ++i) {
        std::vector<std::pair<std::string, std::string>> terms;
        for (std::size_t j = 0; j < i; ++j) {
            const double a = tb.a_at(static_cast<int>(i), static_cast<int>(j));
            if (a != 0.0) terms.push_back({L(a), fmt::format("w[{} + j]", nd.k + j * n)});
        }
        std::string x = "y";
        if (!terms.empty()) {
            o += fmt::format("{}for (std::size_t j = 0; j < {}; ++j) w[{} + j] = y[j] + h * ({});\n", Q, n,
                             nd.arg + (steps ? (i - 1) * n : 0), rk_sum(terms));
            x = W(nd.arg + (steps ? (i - 1) * n : 0));
        }
        o += fmt::format("{}lfield_{}(p, w, t + {} * h, {}, {}, ctx.count);\n", Q, c.name, L(tb.c[i].value), x,
                         W(nd.k + i * n));
    }
    std::vector<std::pair<std::string, std::string>> terms;
    for (std::size_t i = 0; i < s; ++i)
        if (tb.b[i].value != 0.0) terms.push_back({L(tb.b[i].value), fmt::format("w[{} + j]", nd.k + i * n)});
    o += fmt::format("{}for (std::size_t j = 0; j < {}; ++j) y[j] = y[j] + h * ({});\n", Q, n, rk_sum(terms));
    o += fmt::format("{}++ctx.count.steps_accepted;\n", Q);
    o += fmt::format("{}if (!all_finite(y, {})) return learn_result::state_not_finite;\n", Q, n);
    o += fmt::format("{}}}\n{}}}\n", P, pad);
}

void LearnRender::bwd_continuous(std::string& o, const LNode& nd, const std::string& ybar, const std::string& xbar,
                                 const std::string& pad) {
    const Continuous& c = nd.b->continuous;
    const Tableau& tb = *find_tableau(c.solver.method);
    const std::size_t s = static_cast<std::size_t>(tb.stages);
    const std::size_t n = nd.n;
    const int N = c.solver.steps;
    const std::string P = pad + "    ";
    const std::string Q = P + "    ";
    const std::string gfield = nd.fcount > 0 ? fmt::format("g + {}", nd.fbase) : "nullptr";
    if (plan_.way == LearnSpec::Way::steps) {
        // runtime/backprop.cpp backprop_steps, step by step from the last.
        o += fmt::format("{}{{  // continuous {}: back through its {} steps\n", pad, c.name, N);
        o += fmt::format("{}real* const yb = w + {};\n", P, nd.ybar);
        o += fmt::format("{}for (std::size_t i = 0; i < {}; ++i) yb[i] = ({})[i];\n", P, n, ybar);
        o += fmt::format("{}const real h = {};\n", P, L((c.t1 - c.t0) / N));
        o += fmt::format("{}for (std::uint32_t m = {}u; m-- > 0u;) {{\n", P, N);
        o += fmt::format("{}const real t = {} + static_cast<real>(m) * h;\n", Q, L(c.t0));
        o += fmt::format("{}const real* const y = w + {} + m * {};\n", Q, nd.states, n);
        // The step's stage arguments again (stage 1's is y).
        std::vector<std::string> args(s);
        for (std::size_t i = 0; i < s; ++i) {
            std::vector<std::pair<std::string, std::string>> terms;
            for (std::size_t j = 0; j < i; ++j) {
                const double a = tb.a_at(static_cast<int>(i), static_cast<int>(j));
                if (a != 0.0) terms.push_back({L(a), fmt::format("w[{} + j]", nd.k + j * n)});
            }
            args[i] = "y";
            if (!terms.empty()) {
                o += fmt::format("{}for (std::size_t j = 0; j < {}; ++j) w[{} + j] = y[j] + h * ({});\n", Q, n,
                                 nd.arg + (i - 1) * n, rk_sum(terms));
                args[i] = W(nd.arg + (i - 1) * n);
            }
            // The last stage's derivative feeds nothing but y_new: not needed again.
            if (i + 1 < s)
                o += fmt::format("{}lfield_{}(p, w, t + {} * h, {}, {}, ctx.count);\n", Q, c.name, L(tb.c[i].value),
                                 args[i], W(nd.k + i * n));
        }
        for (std::size_t i = 0; i < s; ++i)
            o += fmt::format("{}for (std::size_t j = 0; j < {}; ++j) w[{} + j] = (h * {}) * yb[j];\n", Q, n,
                             nd.kbar + i * n, L(tb.b[i].value));
        o += fmt::format("{}for (std::size_t j = 0; j < {}; ++j) w[{} + j] = yb[j];\n", Q, n, nd.ynb);
        for (std::size_t i = s; i-- > 0;) {
            bool live = tb.b[i].value != 0.0;
            for (std::size_t l = i + 1; l < s; ++l) live = live || tb.a_at(static_cast<int>(l), static_cast<int>(i)) != 0.0;
            if (!live) continue;
            o += fmt::format("{}lvjp_{}(p, w, t + {} * h, {}, {}, {}, {}, nullptr, ctx.count);\n", Q, c.name,
                             L(tb.c[i].value), args[i], W(nd.kbar + i * n), W(nd.argbar), gfield);
            o += fmt::format("{}for (std::size_t j = 0; j < {}; ++j) w[{} + j] += w[{} + j];\n", Q, n, nd.ynb, nd.argbar);
            for (std::size_t j = 0; j < i; ++j) {
                const double a = tb.a_at(static_cast<int>(i), static_cast<int>(j));
                if (a != 0.0)
                    o += fmt::format("{}for (std::size_t q = 0; q < {}; ++q) w[{} + q] += (h * {}) * w[{} + q];\n", Q, n,
                                     nd.kbar + j * n, L(a), nd.argbar);
            }
        }
        o += fmt::format("{}for (std::size_t j = 0; j < {}; ++j) yb[j] = w[{} + j];\n", Q, n, nd.ynb);
        o += fmt::format("{}}}\n", P);
        if (!xbar.empty()) o += fmt::format("{}for (std::size_t i = 0; i < {}; ++i) ({})[i] = yb[i];\n", P, c.width, xbar);
        o += fmt::format("{}}}\n", pad);
        return;
    }
    // runtime/adjoint.cpp adjoint_pass: z = [y, a, g] from t1 back to t0 with the block's
    // own method and steps; the state is recomputed, nothing per step is kept.
    const std::size_t m = nd.m;
    o += fmt::format("{}{{  // continuous {}: the adjoint [y, a, g] from t = {} back to {} in {} steps\n", pad, c.name,
                     format_double(c.t1), format_double(c.t0), N);
    o += fmt::format("{}real* const z = w + {};\n", P, nd.az);
    o += fmt::format("{}for (std::size_t i = 0; i < {}; ++i) z[i] = w[{} + i];\n", P, n, nd.y);
    o += fmt::format("{}for (std::size_t i = 0; i < {}; ++i) z[{} + i] = ({})[i];\n", P, n, n, ybar);
    if (nd.fcount > 0) o += fmt::format("{}for (std::size_t i = {}; i < {}; ++i) z[i] = {};\n", P, 2 * n, m, L(0));
    o += fmt::format("{}const real h = {};\n", P, L((c.t0 - c.t1) / N));
    o += fmt::format("{}for (std::uint32_t q = 0; q < {}u; ++q) {{\n", P, N);
    o += fmt::format("{}const real t = {} + static_cast<real>(q) * h;\n", Q, L(c.t1));
    for (std::size_t i = 0; i < s; ++i) {
        std::vector<std::pair<std::string, std::string>> terms;
        for (std::size_t j = 0; j < i; ++j) {
            const double a = tb.a_at(static_cast<int>(i), static_cast<int>(j));
            if (a != 0.0) terms.push_back({L(a), fmt::format("w[{} + j]", nd.k + j * m)});
        }
        std::string x = "z";
        if (!terms.empty()) {
            o += fmt::format("{}for (std::size_t j = 0; j < {}; ++j) w[{} + j] = z[j] + h * ({});\n", Q, m, nd.arg,
                             rk_sum(terms));
            x = W(nd.arg);
        }
        // The augmented field at (t_i, x): [f, -a^T df/dy, -a^T df/dtheta].
        const std::size_t K = nd.k + i * m;
        if (nd.fcount > 0)
            o += fmt::format("{}for (std::size_t j = 0; j < {}; ++j) w[{} + j] = {};\n", Q, nd.fcount, nd.gtmp, L(0));
        o += fmt::format("{}lvjp_{}(p, w, t + {} * h, {}, ({}) + {}, {}, {}, {}, ctx.count);\n", Q, c.name,
                         L(tb.c[i].value), x, x, n, W(nd.ybtmp), nd.fcount > 0 ? W(nd.gtmp) : "nullptr", W(K));
        o += fmt::format("{}for (std::size_t j = 0; j < {}; ++j) w[{} + j] = -w[{} + j];\n", Q, n, K + n, nd.ybtmp);
        if (nd.fcount > 0)
            o += fmt::format("{}for (std::size_t j = 0; j < {}; ++j) w[{} + j] = -w[{} + j];\n", Q, nd.fcount, K + 2 * n,
                             nd.gtmp);
    }
    std::vector<std::pair<std::string, std::string>> terms;
    for (std::size_t i = 0; i < s; ++i)
        if (tb.b[i].value != 0.0) terms.push_back({L(tb.b[i].value), fmt::format("w[{} + j]", nd.k + i * m)});
    o += fmt::format("{}for (std::size_t j = 0; j < {}; ++j) z[j] = z[j] + h * ({});\n", Q, m, rk_sum(terms));
    o += fmt::format("{}if (!all_finite(z, {})) return learn_result::gradient_not_finite;\n", Q, m);
    o += fmt::format("{}}}\n", P);
    if (nd.fcount > 0)
        o += fmt::format("{}for (std::size_t i = 0; i < {}; ++i) g[{} + i] += z[{} + i];\n", P, nd.fcount, nd.fbase, 2 * n);
    if (!xbar.empty()) o += fmt::format("{}for (std::size_t i = 0; i < {}; ++i) ({})[i] = z[{} + i];\n", P, c.width, xbar, n);
    o += fmt::format("{}}}\n", pad);
}

// ---- passes and entry points ----------------------------------------------------------------

std::string LearnRender::render_prefix() {
    if (plan_.first_block == 0) return "";
    Chain prefix;
    for (std::size_t i = 0; i < plan_.first_block; ++i) prefix.ops.push_back(e_.low.top.ops[i]);
    const Slot last = prefix.ops.back().dst;
    std::string o;
    o += "// The blocks before the first learnable layer, as infer runs them (flash weights).\n";
    o += "result learn_prefix(context& ctx, const real* input, real* out) noexcept {\n";
    o += "    ctx.count = counters{0u, 0u, 0u};\n";
    o += "    real* const work = ctx.work;\n";
    render_chain(e_, o, prefix, "input", "out", "    ", true);
    o += fmt::format("    for (std::size_t i = 0; i < {}; ++i) out[i] = work[{} + i];\n",
                     prefix.ops.back().out_width, last.offset);
    o += "    return result::ok;\n}\n\n";
    return o;
}

std::string LearnRender::render_passes() {
    std::string o;
    const Model& m = e_.model;
    o += "// The forward pass with its record in ctx.work; the output in the last block's buffer\n";
    o += "// (the standardised output's buffer when the output is standardised).\n";
    o += "learn_result learn_forward(learn_context& ctx, const parameters& p, const real* input) noexcept {\n";
    o += "    real* const w = ctx.work;\n";
    o += "    static_cast<void>(p);\n";
    o += "    ctx.count = counters{0u, 0u, 0u};\n";
    // Standardisation as infer does it (compiler/emit/entry.cpp), the same operations in the same order.
    if (m.input_info.standardised) {
        o += fmt::format("    for (std::size_t i = 0; i < input_size; ++i) w[{} + i] = (input[i] - input_mean[i]) / "
                         "input_scale[i];\n",
                         std_in_);
        o += fmt::format("    if (!all_finite({}, input_size)) return learn_result::state_not_finite;\n", W(std_in_));
    }
    const std::string net_in = m.input_info.standardised ? W(std_in_) : std::string("input");
    if (plan_.first_block > 0) {
        o += fmt::format("    const result r = learn_prefix(ctx.run, {}, w + {});\n", net_in, region_in_);
        o += "    ctx.count = ctx.run.count;\n";
        o += "    if (r != result::ok) return static_cast<learn_result>(r);\n";
    } else {
        o += "    static_cast<void>(input);\n";
    }
    fwd_chain(o, region_, L(0), "    ", true);
    if (m.output_info.standardised) {
        o += fmt::format("    for (std::size_t i = 0; i < output_size; ++i) w[{} + i] = w[{} + i] * output_scale[i] + "
                         "output_mean[i];\n",
                         std_out_, region_.nodes.back().y);
        o += fmt::format("    if (!all_finite({}, output_size)) return learn_result::state_not_finite;\n", W(std_out_));
    }
    o += "    return learn_result::ok;\n}\n\n";

    o += "// The reverse pass from dL/doutput (or, with head_gz, from dL/dz of the softmax head) into g,\n";
    o += "// after learn_forward with the same parameters and input.\n";
    o += "learn_result learn_backward(learn_context& ctx, const parameters& p, const real* input, const real* ybar, "
         "bool head_gz, real* g) noexcept {\n";
    o += "    real* const w = ctx.work;\n";
    o += "    static_cast<void>(p);\n    static_cast<void>(input);\n    static_cast<void>(head_gz);\n    static_cast<void>(g);\n";
    bwd_chain(o, region_, "ybar", "", "g", 0, L(0), "    ", true);
    o += "    return learn_result::ok;\n}\n\n";
    return o;
}


}  // namespace meander::emit_detail::learning
