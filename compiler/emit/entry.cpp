// Emit, entry points: the chains of layers, infer and result_name.
#include <fmt/format.h>

#include <cmath>

#include "render.hpp"

namespace meander::emit_detail {

bool chain_uses_work(const Chain& c) {
    for (const ChainOp& op : c.ops) {
        if (op.src.kind == Slot::Kind::work || op.dst.kind == Slot::Kind::work) return true;
        if (op.block->kind == Block::Kind::residual && chain_uses_work(op.body)) return true;
        if (op.block->kind == Block::Kind::continuous) return true;
    }
    return false;
}

namespace {

std::string slot_ptr(const Slot& s, const std::string& in, const std::string& out) {
    switch (s.kind) {
    case Slot::Kind::chain_in: return in;
    case Slot::Kind::chain_out: return out;
    case Slot::Kind::work: return fmt::format("work + {}", s.offset);
    }
    return in;
}
std::string slot_at(const Slot& s, const std::string& in, const std::string& out) {
    switch (s.kind) {
    case Slot::Kind::chain_in: return in + "[i]";
    case Slot::Kind::chain_out: return out + "[i]";
    case Slot::Kind::work: return fmt::format("work[{} + i]", s.offset);
    }
    return in;
}

}  // namespace

void render_chain(const Emission& e, std::string& o, const Chain& c, const std::string& in, const std::string& out,
                  const std::string& pad, bool top) {
    for (const ChainOp& op : c.ops) {
        const std::string src = slot_ptr(op.src, in, out);
        const std::string dst = slot_ptr(op.dst, in, out);
        const Block& b = *op.block;
        const std::string& name = block_name(b);
        if (top) o += fmt::format("{}{}_BLOCK_HOOK(\"{}\", 0);\n", pad, e.M(), name);
        switch (b.kind) {
        case Block::Kind::dense:
            o += fmt::format("{}dense_{}({}, {}{});\n", pad, b.dense.name, src, b.dense.time_input ? "t, " : "", dst);
            break;
        case Block::Kind::residual:
            o += fmt::format("{}// residual {}: {} = x + g(x)\n", pad, b.residual.name, dst);
            render_chain(e, o, op.body, src, dst, pad, false);
            o += fmt::format("{}for (std::size_t i = 0; i < {}; ++i) {} += {};\n", pad, b.residual.width,
                             slot_at(op.dst, in, out), slot_at(op.src, in, out));
            break;
        case Block::Kind::continuous:
            // Braces, not an if with an initialiser: the code builds as C++11.
            o += fmt::format("{}{{ const result r = block_{}(work, {}, {}, ctx.count); if (r != result::ok) return r; }}\n",
                             pad, b.continuous.name, src, dst);
            break;
        }
        if (top) o += fmt::format("{}{}_BLOCK_HOOK(\"{}\", 1);\n", pad, e.M(), name);
        if (top && b.kind != Block::Kind::continuous)
            o += fmt::format("{}if (!all_finite({}, {})) return result::state_not_finite;\n", pad, dst, op.out_width);
    }
}

std::string render_infer(const Emission& e) {
    std::string o;
    o += "result infer(context& ctx, const real* input, real* output) noexcept {\n";
    o += "    ctx.count = counters{0u, 0u, 0u};\n";
    o += "    for (std::size_t i = 0; i < input_size; ++i)\n";
    o += "        if (!std::isfinite(input[i])) return result::input_not_finite;\n";
    if (chain_uses_work(e.low.top)) o += "    real* const work = ctx.work;\n";
    // Standardisation as DEVELOPERS.md "Operation order" states it: a subtraction and a
    // division per input value, a multiplication and an addition per output value.
    std::string in = "input";
    if (e.model.input_info.standardised) {
        in = "standardised";
        o += "    real standardised[input_size];\n";
        o += "    for (std::size_t i = 0; i < input_size; ++i) standardised[i] = (input[i] - input_mean[i]) / input_scale[i];\n";
        o += "    if (!all_finite(standardised, input_size)) return result::state_not_finite;\n";
    }
    if (e.low.top.ops.empty()) o += fmt::format("    for (std::size_t i = 0; i < output_size; ++i) output[i] = {}[i];\n", in);
    render_chain(e, o, e.low.top, in, "output", "    ", true);
    if (e.model.output_info.standardised) {
        o += "    for (std::size_t i = 0; i < output_size; ++i) output[i] = output[i] * output_scale[i] + output_mean[i];\n";
        o += "    if (!all_finite(output, output_size)) return result::state_not_finite;\n";
    }
    o += "    return result::ok;\n}\n\n";
    return o;
}


std::string render_result_name(bool streaming) {
    std::string o = R"(const char* result_name(result r) noexcept {
    switch (r) {
    case result::ok: return "ok";
    case result::input_not_finite: return "input_not_finite";
    case result::state_not_finite: return "state_not_finite";
    case result::step_limit: return "step_limit";
    case result::step_too_small: return "step_too_small";
)";
    if (streaming) o += "    case result::gap_out_of_range: return \"gap_out_of_range\";\n";
    o += "    }\n    return \"unknown\";\n}\n\n";
    return o;
}

std::string render_build_check(Precision p) {
    const bool f = p == Precision::float32;
    auto L = [p](double v) { return real_literal(v, p); };
    // Values for which contraction, another rounding mode or flushing would
    // change the result; volatile so the compiler cannot fold them away.
    return fmt::format(R"(// The build conditions the bits rely on (see the banner), checked on values the
// compiler cannot see: x*x + z is 0 when the product is rounded (and {0} when
// fused into an FMA); 1 + 0.75 ulp rounds up only to nearest; half the least
// normal number is 0 when subnormals are flushed.
bool build_conditions_hold() noexcept {{
    volatile real a = {1};  // 1 + {2}
    volatile real c = {3};  // -(1 + {9})
    volatile real b = {4};  // 0.75 ulp of 1
    volatile real tiny = {5};  // the least normal number
    const real x = a;
    const real fused = x * x + c;
    const real up = {6} + b;
    const real half_tiny = tiny * {7};
    return !(fused < {8} || fused > {8}) && up > {6} && half_tiny > {8};
}}

)",
                       // Decimal literals that read back to exactly these values: hexadecimal
                       // floating literals are C++17, and the code builds as C++11.
                       f ? "2^-24" : "2^-54", L(1.0 + std::ldexp(1.0, f ? -12 : -27)), f ? "2^-12" : "2^-27",
                       L(-(1.0 + std::ldexp(1.0, f ? -11 : -26))), L(3.0 * std::ldexp(1.0, f ? -25 : -54)),
                       L(std::ldexp(1.0, f ? -126 : -1022)),
                       L(1), L(0.5), L(0), f ? "2^-11" : "2^-26");
}

}  // namespace meander::emit_detail
