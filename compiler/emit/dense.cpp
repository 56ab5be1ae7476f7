// Emit, dense kernels: y = act(W x + b) per layer (activations over the
// layer's outputs after its sums; softmax after that). Each output's sum keeps
// the contract's order (DEVELOPERS.md, "Operation order": from zero, inputs
// ascending, time last, then the bias, each product rounded and then added);
// around it the outputs go in blocks of kDenseBlockRows (the last block of a
// layer takes the rows left over), each input loaded once per block, over
// weights that weights.cpp interleaves per block. A block's accumulators are
// a `lanesR` value advanced by `lanesR_mac`; render_dense_steps writes those
// steps three ways that give the same bits, chosen when the emitted code is
// compiled: SSE2 registers on x86, VLDM + VMUL + VADD on an ARMv7E-M FPU, plain
// C++ elsewhere. A block's loop over the inputs is written out in full when
// the layer has at most kUnrollInputs input columns (DEVELOPERS.md states the
// measured trade). Such a layer with at most kUnrollBlocks blocks asks GCC on
// x86 (SSE2) to unroll its loops over the blocks and over the four-lane
// activations, which GCC -O2 leaves rolled (boiler_ahead's float32 infer about
// 5% faster on x86-64, tests/bench/README.md); a pragma only, so that on the
// Cortex-M targets, where flash counts, the code stays a loop. An integer
// layer (compiler/quantise.hpp) goes through the same blocks with `qlanesR`
// steps (plain C++, or the same operations in assembly on an ARMv7E-M FPU):
// each holds its rows' scales and adds fl(real(q) * s) * x, the dequantised
// real layer's product, so the bits are the real layer's; it keeps the loop
// over the inputs.
#include <fmt/format.h>

#include <map>
#include <set>

#include "render.hpp"

namespace meander::emit_detail {

namespace {

// The block sizes of the real layers (integer: false) or of the integer
// layers (true), each with whether a layer of that size adds a bias (the
// _add step is written only then: clang warns of an unused function, and the
// warnings builds treat that as an error).
std::map<int, bool> block_sizes(const Model& m, bool integer) {
    std::map<int, bool> sizes;
    for_each_model_dense(m, [&](const Dense& d) {
        if ((d.storage != WeightStorage::real) != integer) return;
        if (d.out >= kDenseBlockRows) sizes[kDenseBlockRows] |= d.has_bias;
        if (d.out % kDenseBlockRows) sizes[d.out % kDenseBlockRows] |= d.has_bias;
    });
    return sizes;
}

const char* const kLane = "abcd";  // accumulator names of a lanesR struct

// The emitted code's test for ARMv7E-M with a single-precision FPU (Cortex-M4F, M7).
std::string arm_fpu_condition() { return "defined(__ARM_ARCH_7EM__) && defined(__ARM_FP) && (__ARM_FP & 4)"; }

// The plain C++ steps: one accumulator per row, `a += w * x` each.
std::string portable_steps(const Emission& e, int R, bool bias, const std::string& inl) {
    std::string o = fmt::format("struct lanes{} {{ real", R);
    for (int r = 0; r < R; ++r) o += fmt::format("{} {}", r ? "," : "", kLane[r]);
    o += "; };\n";
    o += fmt::format("{} void lanes{}_zero(lanes{}& s) noexcept {{", inl, R, R);
    for (int r = 0; r < R; ++r) o += fmt::format(" s.{} = {};", kLane[r], e.L(0));
    o += " }\n";
    o += fmt::format("{} void lanes{}_mac(lanes{}& s, const real*& w, real x) noexcept {{\n   ", inl, R, R);
    for (int r = 0; r < R; ++r) o += fmt::format(" s.{} += w[{}] * x;", kLane[r], r);
    o += fmt::format("\n    w += {};\n}}\n", R);
    if (bias) {
        o += fmt::format("{} void lanes{}_add(lanes{}& s, const real* b) noexcept {{", inl, R, R);
        for (int r = 0; r < R; ++r) o += fmt::format(" s.{} += b[{}];", kLane[r], r);
        o += " }\n";
    }
    o += fmt::format("{} void lanes{}_store(const lanes{}& s, real* y) noexcept {{", inl, R, R);
    for (int r = 0; r < R; ++r) o += fmt::format(" y[{}] = s.{};", r, kLane[r]);
    o += " }\n";
    return o;
}

// ARMv7E-M with a single-precision FPU, float32: the integer layer's mac as
// the C++ above computes it, written out. GCC would load, move and convert one
// weight at a time and join the last multiply and the add into VMLA (3 cycles
// against 1 + 1); here the R weights are loaded by LDRSB/LDRSH with the address
// advanced, moved two at a time (VMOV of two core registers to two singles: 2
// cycles, as one), converted, scaled, multiplied by x and added (Cortex-M4 TRM,
// DDI 0439, 7.2.3). The same operations, so the same bits.
std::string arm_integer_mac(int R, WeightStorage st, const std::string& inl) {
    const std::string type(weight_storage_name(st));
    const int size = st == WeightStorage::int8 ? 1 : 2;
    const char* load = st == WeightStorage::int8 ? "ldrsb" : "ldrsh";
    std::string o = fmt::format("{} void qlanes{}_mac(qlanes{}& s, const std::{}_t*& w, real x) noexcept {{\n", inl, R, R, type);
    o += "    int";
    for (int r = 0; r < R; ++r) o += fmt::format("{} q{}", r ? "," : "", r);
    o += ";\n    __asm__(";
    std::vector<std::string> lines;
    for (int r = 0; r < R; ++r) lines.push_back(fmt::format("{} %[q{}], [%[w]], #{}", load, r, size));
    for (int r = 0; r + 1 < R; r += 2) lines.push_back(fmt::format("vmov s{}, s{}, %[q{}], %[q{}]", 12 + r, 13 + r, r, r + 1));
    if (R % 2) lines.push_back(fmt::format("vmov s{}, %[q{}]", 11 + R, R - 1));
    for (int r = 0; r < R; ++r) lines.push_back(fmt::format("vcvt.f32.s32 s{0}, s{0}", 12 + r));
    for (int r = 0; r < R; ++r) lines.push_back(fmt::format("vmul.f32 s{0}, s{0}, %[s{1}]", 12 + r, kLane[r]));
    for (int r = 0; r < R; ++r) lines.push_back(fmt::format("vmul.f32 s{0}, s{0}, %[x]", 12 + r));
    for (int r = 0; r < R; ++r) lines.push_back(fmt::format("vadd.f32 %[{0}], %[{0}], s{1}", kLane[r], 12 + r));
    for (std::size_t i = 0; i < lines.size(); ++i)
        o += fmt::format("{}\"{}{}\"\n", i ? "            " : "", lines[i], i + 1 < lines.size() ? "\\n\\t" : "");
    std::string outs, ins, clobbers;
    for (int r = 0; r < R; ++r) outs += fmt::format("[{0}] \"+t\"(s.{0}), ", kLane[r]);
    outs += "[w] \"+r\"(w)";
    for (int r = 0; r < R; ++r) outs += fmt::format(", [q{0}] \"=&r\"(q{0})", r);
    ins = "[x] \"t\"(x)";
    for (int r = 0; r < R; ++r) ins += fmt::format(", [s{0}] \"t\"(s.s{0})", kLane[r]);
    ins += fmt::format(", \"m\"(*reinterpret_cast<const std::{}_t(*)[{}]>(w))", type, R);
    for (int r = 0; r < R; ++r) clobbers += fmt::format("{}\"s{}\"", r ? ", " : "", 12 + r);
    o += fmt::format("            : {}\n            : {}\n            : {});\n}}\n", outs, ins, clobbers);
    return o;
}

// An integer layer's steps: the R sums and their rows' scales; qlanesR_mac
// dequantises each weight as the real layer holds it, fl(real(q) * s), then
// multiplies and adds as lanesR_mac does. One mac per integer type in use.
std::string integer_steps(const Emission& e, int R, bool bias, const std::set<WeightStorage>& types,
                          const std::string& inl) {
    std::string o = fmt::format("struct qlanes{} {{ real", R);
    for (int r = 0; r < R; ++r) o += fmt::format("{} {}", r ? "," : "", kLane[r]);
    for (int r = 0; r < R; ++r) o += fmt::format(", s{}", kLane[r]);
    o += "; };\n";
    o += fmt::format("{} void qlanes{}_zero(qlanes{}& s, const real* scale) noexcept {{", inl, R, R);
    for (int r = 0; r < R; ++r) o += fmt::format(" s.{} = {}; s.s{} = scale[{}];", kLane[r], e.L(0), kLane[r], r);
    o += " }\n";
    const bool f32 = e.p == Precision::float32;
    if (f32) o += "#if " + arm_fpu_condition() + "\n";
    for (WeightStorage st : types)
        if (f32) o += arm_integer_mac(R, st, inl);
    if (f32) o += "#else\n";
    for (WeightStorage st : types) {
        o += fmt::format("{} void qlanes{}_mac(qlanes{}& s, const std::{}_t*& w, real x) noexcept {{\n", inl, R, R,
                         weight_storage_name(st));
        for (int r = 0; r < R; ++r)
            o += fmt::format("    s.{0} += (static_cast<real>(w[{1}]) * s.s{0}) * x;\n", kLane[r], r);
        o += fmt::format("    w += {};\n}}\n", R);
    }
    if (f32) o += "#endif\n";
    if (bias) {
        o += fmt::format("{} void qlanes{}_add(qlanes{}& s, const real* b) noexcept {{", inl, R, R);
        for (int r = 0; r < R; ++r) o += fmt::format(" s.{} += b[{}];", kLane[r], r);
        o += " }\n";
    }
    o += fmt::format("{} void qlanes{}_store(const qlanes{}& s, real* y) noexcept {{", inl, R, R);
    for (int r = 0; r < R; ++r) o += fmt::format(" y[{}] = s.{};", r, kLane[r]);
    o += " }\n";
    return o;
}

// x86 with SSE2: float32 four rows in one register (a last block of two in its
// low half: 64-bit loads and stores, the upper lanes unused); float64 two rows
// per register. Packed multiply then packed add: per lane the same two roundings.
std::string sse_steps(const Emission& e, int R, bool bias, const std::string& inl) {
    std::string o;
    if (e.p == Precision::float32 && R == 2) {
        const std::string half = "_mm_loadl_pi(_mm_setzero_ps(), reinterpret_cast<const __m64*>({}))";
        o += "struct lanes2 { __m128 v; };\n";
        o += inl + " void lanes2_zero(lanes2& s) noexcept { s.v = _mm_setzero_ps(); }\n";
        o += inl + " void lanes2_mac(lanes2& s, const real*& w, real x) noexcept {\n";
        o += fmt::format("    s.v = _mm_add_ps(s.v, _mm_mul_ps({}, _mm_set1_ps(x)));\n", fmt::format(fmt::runtime(half), "w"));
        o += "    w += 2;\n}\n";
        if (bias)
            o += inl + fmt::format(" void lanes2_add(lanes2& s, const real* b) noexcept {{ s.v = _mm_add_ps(s.v, {}); }}\n",
                                   fmt::format(fmt::runtime(half), "b"));
        o += inl + " void lanes2_store(const lanes2& s, real* y) noexcept { _mm_storel_pi(reinterpret_cast<__m64*>(y), s.v); }\n";
        return o;
    }
    if (e.p == Precision::float32) {
        o += "struct lanes4 { __m128 v; };\n";
        o += inl + " void lanes4_zero(lanes4& s) noexcept { s.v = _mm_setzero_ps(); }\n";
        o += inl + " void lanes4_mac(lanes4& s, const real*& w, real x) noexcept {\n"
                   "    s.v = _mm_add_ps(s.v, _mm_mul_ps(_mm_loadu_ps(w), _mm_set1_ps(x)));\n"
                   "    w += 4;\n}\n";
        if (bias) o += inl + " void lanes4_add(lanes4& s, const real* b) noexcept { s.v = _mm_add_ps(s.v, _mm_loadu_ps(b)); }\n";
        o += inl + " void lanes4_store(const lanes4& s, real* y) noexcept { _mm_storeu_ps(y, s.v); }\n";
        return o;
    }
    const int regs = R / 2;
    o += fmt::format("struct lanes{} {{ __m128d", R);
    for (int k = 0; k < regs; ++k) o += fmt::format("{} v{}", k ? "," : "", k);
    o += "; };\n";
    o += fmt::format("{} void lanes{}_zero(lanes{}& s) noexcept {{", inl, R, R);
    for (int k = 0; k < regs; ++k) o += fmt::format(" s.v{} = _mm_setzero_pd();", k);
    o += " }\n";
    o += fmt::format("{} void lanes{}_mac(lanes{}& s, const real*& w, real x) noexcept {{\n", inl, R, R);
    o += "    const __m128d xx = _mm_set1_pd(x);\n";
    for (int k = 0; k < regs; ++k)
        o += fmt::format("    s.v{0} = _mm_add_pd(s.v{0}, _mm_mul_pd(_mm_loadu_pd(w + {1}), xx));\n", k, 2 * k);
    o += fmt::format("    w += {};\n}}\n", R);
    if (bias) {
        o += fmt::format("{} void lanes{}_add(lanes{}& s, const real* b) noexcept {{", inl, R, R);
        for (int k = 0; k < regs; ++k)
            o += fmt::format(" s.v{0} = _mm_add_pd(s.v{0}, _mm_loadu_pd(b + {1}));", k, 2 * k);
        o += " }\n";
    }
    o += fmt::format("{} void lanes{}_store(const lanes{}& s, real* y) noexcept {{", inl, R, R);
    for (int k = 0; k < regs; ++k) o += fmt::format(" _mm_storeu_pd(y + {}, s.v{});", 2 * k, k);
    o += " }\n";
    return o;
}

// ARMv7E-M with a single-precision FPU (Cortex-M4F, M7), float32: the R
// weights come in with one VLDM into s12.. (caller-saved, so nothing to save),
// then VMUL and VADD per row. Left to itself GCC joins the multiply and the add
// into VMLA, which rounds the product just the same but costs 3 cycles against
// 1 + 1, and loads each weight with its own VLDR (2 cycles against 1 + R for
// the VLDM; Cortex-M4 TRM, DDI 0439, 7.2.3).
std::string arm_steps(int R, bool bias, const std::string& inl) {
    std::string o = fmt::format("struct lanes{} {{ real", R);
    for (int r = 0; r < R; ++r) o += fmt::format("{} {}", r ? "," : "", kLane[r]);
    o += "; };\n";
    o += fmt::format("{} void lanes{}_zero(lanes{}& s) noexcept {{", inl, R, R);
    for (int r = 0; r < R; ++r) o += fmt::format(" s.{} = 0.0f;", kLane[r]);
    o += " }\n";
    const std::string regs = R == 1 ? "s12" : fmt::format("s12-s{}", 11 + R);
    std::string outs, clobbers;
    for (int r = 0; r < R; ++r) {
        outs += fmt::format("{}[{}] \"+t\"(s.{})", r ? ", " : "", kLane[r], kLane[r]);
        clobbers += fmt::format("{}\"s{}\"", r ? ", " : "", 12 + r);
    }
    o += fmt::format("{} void lanes{}_mac(lanes{}& s, const real*& w, real x) noexcept {{\n", inl, R, R);
    o += fmt::format("    __asm__(\"vldmia %[w]!, {{{}}}\\n\\t\"\n", regs);
    for (int r = 0; r < R; ++r) o += fmt::format("            \"vmul.f32 s{0}, s{0}, %[x]\\n\\t\"\n", 12 + r);
    for (int r = 0; r < R; ++r)
        o += fmt::format("            \"vadd.f32 %[{0}], %[{0}], s{1}{2}\"\n", kLane[r], 12 + r, r + 1 < R ? "\\n\\t" : "");
    o += fmt::format("            : {}, [w] \"+r\"(w)\n", outs);
    o += fmt::format("            : [x] \"t\"(x), \"m\"(*reinterpret_cast<const real(*)[{}]>(w))\n", R);
    o += fmt::format("            : {});\n}}\n", clobbers);
    if (bias) {
        o += fmt::format("{} void lanes{}_add(lanes{}& s, const real* b) noexcept {{\n", inl, R, R);
        o += fmt::format("    __asm__(\"vldmia %[p], {{{}}}\\n\\t\"\n", regs);
        for (int r = 0; r < R; ++r)
            o += fmt::format("            \"vadd.f32 %[{0}], %[{0}], s{1}{2}\"\n", kLane[r], 12 + r,
                             r + 1 < R ? "\\n\\t" : "");
        o += fmt::format("            : {}\n", outs);
        o += fmt::format("            : [p] \"r\"(b), \"m\"(*reinterpret_cast<const real(*)[{}]>(b))\n", R);
        o += fmt::format("            : {});\n}}\n", clobbers);
    }
    o += fmt::format("{} void lanes{}_store(const lanes{}& s, real* y) noexcept {{", inl, R, R);
    for (int r = 0; r < R; ++r) o += fmt::format(" y[{}] = s.{};", r, kLane[r]);
    o += " }\n";
    return o;
}

}  // namespace

std::string render_dense_includes(const Emission& e) {
    bool lanes = !block_sizes(e.model, false).empty();
    for_each_model_dense(e.model, [&](const Dense& d) { lanes = lanes || four_lane_kernel(e.p, d); });
    return lanes ? "#if defined(__SSE2__)\n#include <emmintrin.h>\n#endif\n\n" : "";
}

std::string render_dense_steps(const Emission& e) {
    const std::map<int, bool> sizes = block_sizes(e.model, false);
    const std::map<int, bool> int_sizes = block_sizes(e.model, true);
    if (sizes.empty() && int_sizes.empty()) return "";
    const bool f32 = e.p == Precision::float32;
    const std::string inl = e.M() + "_STEP";
    std::string o;
    o += "// Dense kernel steps. lanesR holds the sums of R outputs of one block; lanesR_mac\n"
         "// adds w[r] * x to sum r (the product rounded, then the sum: never fused) and moves\n"
         "// w past the R weights; lanesR_add adds the bias, lanesR_store writes the sums out.\n"
         "// Three ways to the same bits, chosen by the compiler's target: x86 with SSE2 (one\n"
         "// register holds four float sums or two double sums: a packed multiply, then a packed\n";
    o += "// add), Cortex-M4F and M7 in float32 (one VLDM brings the R weights, then VMUL and\n"
         "// VADD per row, written out because GCC would join them into VMLA, which rounds the\n"
         "// same but costs 3 cycles against 1 + 1 in the Cortex-M4 TRM, 7.2.3), and plain C++.\n";
    o += fmt::format("#if defined(__GNUC__)\n#define {0} __attribute__((always_inline)) inline\n#else\n#define {0} inline\n"
                     "#endif\n",
                     inl);
    const std::string arm = arm_fpu_condition();
    for (const auto& [R, bias] : sizes) {
        const bool sse = f32 ? R == 4 || R == 2 : R % 2 == 0;
        if (sse) {
            o += "#if defined(__SSE2__)\n" + sse_steps(e, R, bias, inl);
            o += f32 ? "#elif " + arm + "\n" + arm_steps(R, bias, inl) : std::string();
        } else if (f32) {
            o += "#if " + arm + "\n" + arm_steps(R, bias, inl);
        }
        if (sse || f32) o += "#else\n";
        o += portable_steps(e, R, bias, inl);
        if (sse || f32) o += "#endif\n";
    }
    if (!int_sizes.empty()) {
        // Per block size, the integer types its layers use: one qlanesR_mac each
        // (an unused one would be a warning, as above).
        std::map<int, std::set<WeightStorage>> types;
        for_each_model_dense(e.model, [&](const Dense& d) {
            if (d.storage == WeightStorage::real) return;
            if (d.out >= kDenseBlockRows) types[kDenseBlockRows].insert(d.storage);
            if (d.out % kDenseBlockRows) types[d.out % kDenseBlockRows].insert(d.storage);
        });
        o += "// Integer layers: qlanesR keeps R sums and their rows' scales; qlanesR_mac adds\n"
             "// (real(q[r]) * scale r) * x to sum r, the product of the weight the real layer\n"
             "// would hold (W = real(q) * scale, rounded), so the sums are the real layer's bits.\n";
        if (e.p == Precision::float32)
            o += "// On the Cortex-M4F and M7 the same operations in assembly: the R integers loaded,\n"
                 "// moved to the FPU two at a time, converted, scaled, multiplied by x and added\n"
                 "// (GCC would move one at a time and join the last product and sum into VMLA).\n";
        for (const auto& [R, bias] : int_sizes) o += integer_steps(e, R, bias, types[R], inl);
    }
    o += "\n";
    return o;
}

std::string render_dense_layers(const Emission& e) {
    std::string o = render_dense_steps(e);
    const int R = kDenseBlockRows;
    for_each_model_dense(e.model, [&](const Dense& d) {
        const std::string sym = layer_symbol(e.model, d);
        const int cols = d.in_total();
        const int blocks = d.out / R;
        const int rest = d.out % R;
        const bool ints = d.storage != WeightStorage::real;
        // Integer layers keep the loop: written out, each weight's load, conversion and scaling
        // would cost more code than the integers save (tests/target/storage_threshold.sh).
        const bool unroll = cols <= kUnrollInputs && !ints;
        // GCC unrolls the loops over the blocks and the four-lane activations on x86 (clang reads
        // the pragma too).
        const bool unroll_blocks = unroll && blocks <= kUnrollBlocks;
        const std::string steps = ints ? "qlanes" : "lanes";
        o += fmt::format("// dense {}: {}{} -> {}, {}{}; {} block{} of {} outputs{}{}\n", sym, d.in,
                         d.time_input ? " + t" : "", d.out, activation_name(d.act),
                         ints ? fmt::format(", weights as {}", weight_storage_name(d.storage)) : "", blocks,
                         blocks == 1 ? "" : "s", R, rest ? fmt::format(", one of {}", rest) : "",
                         unroll ? ", inputs written out" : "");
        o += fmt::format("void dense_{}(const real* __restrict x, {}real* __restrict y) noexcept {{\n", sym,
                         d.time_input ? "real t, " : "");
        // Through volatile copies of the addresses: where the indices are
        // constants (inputs written out, a single block) the compiler would
        // otherwise fold weights and biases into the code, out of their
        // arrays and the NAME_WEIGHTS_ATTR section.
        const std::string wt = ints ? fmt::format("std::{}_t", weight_storage_name(d.storage)) : "real";
        o += fmt::format("    const {}* const volatile w_at = w_{};\n", wt, sym);
        o += fmt::format("    const {}* w = w_at;  // advanced by the steps\n", wt);
        if (ints) {
            o += fmt::format("    const real* const volatile s_at = s_{};\n", sym);
            o += "    const real* __restrict sc = s_at;\n";
        }
        if (d.has_bias) {
            o += fmt::format("    const real* const volatile b_at = b_{};\n", sym);
            o += "    const real* __restrict b = b_at;\n";
        }
        // One block of n outputs starting at `at` (an expression).
        auto block = [&](int n, const std::string& at, const std::string& pad) {
            o += fmt::format("{}{}{} s;\n{}{}{}_zero(s{});\n", pad, steps, n, pad, steps, n,
                             ints ? fmt::format(", sc + {}", at) : "");
            if (unroll) {
                for (int i = 0; i < d.in; ++i) o += fmt::format("{}{}{}_mac(s, w, x[{}]);\n", pad, steps, n, i);
            } else {
                o += fmt::format("{}for (std::size_t i = 0; i < {}; ++i) {}{}_mac(s, w, x[i]);\n", pad, d.in, steps, n);
            }
            if (d.time_input) o += fmt::format("{}{}{}_mac(s, w, t);\n", pad, steps, n);
            if (d.has_bias) o += fmt::format("{}{}{}_add(s, b + {});\n", pad, steps, n, at);
            o += fmt::format("{}{}{}_store(s, y + {});\n", pad, steps, n, at);
        };
        if (blocks > 1) {
            if (unroll_blocks)
                o += fmt::format("#if defined(__SSE2__) && defined(__GNUC__)\n#pragma GCC unroll {}\n#endif\n", blocks);
            o += fmt::format("    for (std::size_t o = 0; o < {}; o += {}) {{\n", blocks * R, R);
            block(R, "o", "        ");
            o += "    }\n";
        } else if (blocks == 1) {
            o += "    {\n";
            block(R, "0", "        ");
            o += "    }\n";
        }
        if (rest > 0) {
            o += "    {\n";
            block(rest, std::to_string(blocks * R), "        ");
            o += "    }\n";
        }
        const std::string act = apply_activation(e, d, "y[o]");
        const std::string each = fmt::format("    for (std::size_t o = 0; o < {}; ++o) y[o] = {};\n", d.out, act);
        if (four_lane_kernel(e.p, d)) {
            // Four outputs at a time on SSE2 (runtime/math_lanes.inc: the scalar kernel's bits).
            const int whole = d.out / 4 * 4;
            o += "#if defined(__SSE2__)\n";
            if (unroll_blocks && whole > 4) o += fmt::format("#if defined(__GNUC__)\n#pragma GCC unroll {}\n#endif\n", whole / 4);
            o += fmt::format("    for (std::size_t o = 0; o < {}; o += 4) act_{}4(y + o);\n", whole,
                             activation_name(d.act));
            if (whole < d.out) o += fmt::format("    for (std::size_t o = {}; o < {}; ++o) y[o] = {};\n", whole, d.out, act);
            o += "#else\n" + each + "#endif\n";
        } else if (act != "y[o]") {
            o += each;
        }
        if (d.act == Activation::softmax) {
            o += "    // Max-subtracted: exp never overflows and the largest term is 1.\n";
            o += "    real top = y[0];\n";
            o += fmt::format("    for (std::size_t o = 1; o < {}; ++o)\n        if (y[o] > top) top = y[o];\n",
                             d.out);
            o += fmt::format("    real sum = {};\n", e.L(0));
            o += fmt::format("    for (std::size_t o = 0; o < {}; ++o) {{\n", d.out);
            o += fmt::format("        y[o] = {}(y[o] - top);\n        sum += y[o];\n    }}\n", e.math("exp"));
            o += fmt::format("    for (std::size_t o = 0; o < {}; ++o) y[o] = y[o] / sum;\n", d.out);
        }
        o += "}\n\n";
    });
    return o;
}

}  // namespace meander::emit_detail
