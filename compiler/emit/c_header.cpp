// Emit, C callers (EmitOptions.c_header): NAME.h, a plain C header (C99 and
// later; also valid C++), and the extern "C" entry points at the end of
// NAME.cpp that forward to the C++ code. The C side sees the context as an
// opaque block of bytes; the source checks its size and alignment against the
// C++ context, and the header's stamp as it does the C++ header's. A plain
// model gets NAME_infer; a streaming model NAME_reset and NAME_observe, its
// sizes, largest gap and worst case per observation, and the gap_out_of_range
// code.
#include <fmt/format.h>

#include <algorithm>
#include <vector>

#include "render.hpp"

namespace meander::emit_detail {

namespace {

// sizeof(NAME::context): [state,] work, counters, padded to the real's alignment.
std::size_t context_bytes(const Emission& e) {
    const std::size_t r = e.p == Precision::float32 ? 4 : 8;
    const std::size_t state = e.model.stream ? static_cast<std::size_t>(e.model.stream->state_size) * r : 0;
    const std::size_t work = std::max<std::size_t>(e.low.workspace_size, 1) * r;
    const std::size_t raw = state + work + 3 * 4;  // counters: three uint32
    return (raw + r - 1) / r * r;
}

// The result codes in the enum's order; a streaming model has one more.
std::vector<const char*> result_codes(const Emission& e) {
    std::vector<const char*> c = {"OK", "INPUT_NOT_FINITE", "STATE_NOT_FINITE", "STEP_LIMIT", "STEP_TOO_SMALL"};
    if (e.model.stream) c.push_back("GAP_OUT_OF_RANGE");
    return c;
}

// A streaming model's constants: the C++ header's, as macros C can use in #if and
// static assertions (the gap as a literal of the real type).
std::string stream_constants(const Emission& e) {
    const std::string M_ = e.M();
    const Stream& st = *e.model.stream;
    std::string o = "/* The state carried between observations, in reals; a gap outside [0, LARGEST_GAP]\n"
                    "   is refused. */\n";
    o += fmt::format("#define {}_STATE_SIZE {}u\n#define {}_LARGEST_GAP {}\n\n", M_, st.state_size, M_,
                     e.L(st.largest_gap));
    o += "/* Resources per observation at the largest gap (the worst case): workspace in reals,\n"
         "   weights and biases, multiply-accumulates of the dense layers per evaluation of every\n"
         "   field and in all, field evaluations. */\n";
    o += fmt::format("#define {}_WORKSPACE_SIZE {}u\n", M_, e.low.workspace_size);
    o += fmt::format("#define {}_PARAMETER_COUNT {}u\n", M_, e.low.parameter_count);
    o += fmt::format("#define {}_MACS_PER_FIELD_EVAL {}u\n", M_, e.low.macs_per_field_eval);
    o += fmt::format("#define {}_WORST_FIELD_EVALS {}u\n", M_, e.low.worst_field_evals);
    o += fmt::format("#define {}_WORST_MACS {}ull\n\n", M_, e.low.worst_macs);
    return o;
}

}  // namespace

std::string render_c_header(const Emission& e) {
    const std::string M_ = e.M();
    const std::string& n = e.model.name;
    std::string o = banner(e.model, e.opts, n + ".h");
    o += fmt::format("#ifndef MEANDER_GENERATED_{0}_H\n#define MEANDER_GENERATED_{0}_H\n\n", M_);
    o += fmt::format("/* For C callers (C99 or later): the C++ code of {0}.cpp through extern \"C\" entry\n"
                     "   points, built with a C++11 (or later) compiler and linked with the C program.\n"
                     "   {0}.cpp refuses a {0}.h from another meander run. */\n",
                     n);
    o += fmt::format("#define {}_MEANDER_C_STAMP {}\n\n", M_, kStampHole);
    o += "#include <stddef.h>\n#include <stdint.h>\n\n";
    o += "#ifdef __cplusplus\nextern \"C\" {\n#endif\n\n";
    o += fmt::format("typedef {} {}_real;\n\n", e.real_name(), n);
    o += "/* Sizes of one input and one output vector, in reals. */\n";
    o += fmt::format("#define {}_INPUT_SIZE {}u\n#define {}_OUTPUT_SIZE {}u\n\n", M_, e.model.input_size, M_,
                     e.model.output_size);
    if (e.model.stream) o += stream_constants(e);
    if (e.model.stream)
        o += "/* What the observe function returns (the C++ header's enum result, as an int). Only\n"
             "   with OK does the output hold the readout and the state move on; with any other code\n"
             "   the state is exactly as before the call. GAP_OUT_OF_RANGE: the gap is negative,\n"
             "   larger than LARGEST_GAP or not finite. */\n";
    else
        o += "/* What the infer function returns (the C++ header's enum result, as an int). Only\n"
             "   with OK does the output hold the model's result. */\n";
    const std::vector<const char*> codes = result_codes(e);
    for (std::size_t i = 0; i < codes.size(); ++i) o += fmt::format("#define {}_{} {}\n", M_, codes[i], i);
    if (e.model.stream)
        o += "\n/* Work done by the last call of the observe function, over the evolution and the\n"
             "   readout's continuous blocks: field evaluations, accepted steps (every step of a\n"
             "   fixed-step block) and rejected adaptive steps. */\n";
    else
        o += "\n/* Work done by the last call of the infer function, summed over the continuous blocks:\n"
             "   field evaluations, accepted steps (every step of a fixed-step block) and rejected\n"
             "   adaptive steps. */\n";
    o += fmt::format("typedef struct {0}_counters {{\n    uint32_t field_evals;\n    uint32_t steps_accepted;\n"
                     "    uint32_t steps_rejected;\n}} {0}_counters;\n\n",
                     n);
    if (e.model.stream)
        o += fmt::format("/* The state of one stream (sensor, task) and everything the observe function writes,\n"
                         "   owned by the caller (static or in a pool; one per stream). Opaque: {0}_CONTEXT_BYTES\n"
                         "   bytes aligned as a {1} (the source checks both against the C++ context). */\n",
                         M_, e.real_name());
    else
        o += fmt::format("/* Everything the infer function writes, owned by the caller (static, on the stack or\n"
                         "   in a pool; one per caller: thread, task, interrupt level). Opaque: {0}_CONTEXT_BYTES\n"
                         "   bytes aligned as a {1} (the source checks both against the C++ context). */\n",
                         M_, e.real_name());
    o += fmt::format("#define {}_CONTEXT_BYTES {}u\n", M_, context_bytes(e));
    o += fmt::format("typedef union {0}_context {{\n    unsigned char bytes[{1}_CONTEXT_BYTES];\n    {0}_real align;\n}} "
                     "{0}_context;\n\n",
                     n, M_);
    if (e.model.stream) {
        o += fmt::format("/* Starts a new sequence on this context: the state becomes zero. */\n"
                         "void {0}_reset({0}_context* context);\n\n",
                         n);
        o += fmt::format("/* One observation input[0 .. {0}_INPUT_SIZE), `gap` time units after the previous one\n"
                         "   (0 for the first after reset), read out into output[0 .. {0}_OUTPUT_SIZE); input and\n"
                         "   output must not overlap. Returns {0}_OK or another result code. */\n"
                         "int {1}_observe({1}_context* context, const {1}_real* input, {1}_real gap, {1}_real* output);\n\n",
                         M_, n);
    } else {
        o += fmt::format("/* Runs the model on input[0 .. {0}_INPUT_SIZE) into output[0 .. {0}_OUTPUT_SIZE);\n"
                         "   input and output must not overlap. Returns {0}_OK or another result code. */\n",
                         M_);
        o += fmt::format("int {0}_infer({0}_context* context, const {0}_real* input, {0}_real* output);\n\n", n);
    }
    o += fmt::format("/* The counters of the last {0}_{1} call on this context. */\n", n, e.model.stream ? "observe" : "infer");
    o += fmt::format("{0}_counters {0}_counters_of(const {0}_context* context);\n\n", n);
    o += "/* \"ok\", \"input_not_finite\", ...; \"unknown\" for any other number. */\n";
    o += fmt::format("const char* {}_result_name(int result);\n\n", n);
    o += "/* 1 when this build keeps the conditions the banner states for identical bits, else 0. */\n";
    o += fmt::format("int {}_build_conditions_hold(void);\n\n", n);
    o += "#ifdef __cplusplus\n}  /* extern \"C\" */\n#endif\n\n";
    o += fmt::format("#endif  /* MEANDER_GENERATED_{}_H */\n", M_);
    return o;
}

// The checks and entry points that NAME.cpp ends with; `stamp` is NAME.h's.
std::string render_c_entry(const Emission& e, const std::string& stamp) {
    const std::string M_ = e.M();
    const std::string& n = e.model.name;
    std::string o = fmt::format("\n// The C entry points declared in {}.h.\n", n);
    o += fmt::format("#include \"{}.h\"\n\n", n);
    o += fmt::format("#if !defined({0}_MEANDER_C_STAMP) || {0}_MEANDER_C_STAMP != {1}\n", M_, stamp);
    o += fmt::format("#error \"{}.h is not the C header generated with this source: regenerate both\"\n#endif\n\n", n);
    o += fmt::format("static_assert(sizeof({0}::context) == {1}_CONTEXT_BYTES, \"context size\");\n", n, M_);
    o += fmt::format("static_assert(alignof({0}::context) <= alignof({0}_context), \"context alignment\");\n", n);
    o += fmt::format("static_assert(sizeof({0}_counters) == sizeof({0}::counters), \"counters\");\n\n", n);
    if (e.model.stream) {
        o += fmt::format("extern \"C\" void {0}_reset({0}_context* context) {{\n"
                         "    {0}::reset(*reinterpret_cast<{0}::context*>(context));\n"
                         "}}\n\n",
                         n);
        o += fmt::format("extern \"C\" int {0}_observe({0}_context* context, const {0}_real* input, {0}_real gap, "
                         "{0}_real* output) {{\n"
                         "    return static_cast<int>({0}::observe(*reinterpret_cast<{0}::context*>(context), input, gap, output));\n"
                         "}}\n\n",
                         n);
    } else {
        o += fmt::format("extern \"C\" int {0}_infer({0}_context* context, const {0}_real* input, {0}_real* output) {{\n"
                         "    return static_cast<int>({0}::infer(*reinterpret_cast<{0}::context*>(context), input, output));\n"
                         "}}\n\n",
                         n);
    }
    o += fmt::format("extern \"C\" {0}_counters {0}_counters_of(const {0}_context* context) {{\n"
                     "    const {0}::counters& c = reinterpret_cast<const {0}::context*>(context)->count;\n"
                     "    {0}_counters out;\n"
                     "    out.field_evals = c.field_evals;\n"
                     "    out.steps_accepted = c.steps_accepted;\n"
                     "    out.steps_rejected = c.steps_rejected;\n"
                     "    return out;\n"
                     "}}\n\n",
                     n);
    o += fmt::format("extern \"C\" const char* {0}_result_name(int result) {{\n"
                     "    if (result < 0 || result > {1}_{2}) return \"unknown\";\n"
                     "    return {0}::result_name(static_cast<{0}::result>(result));\n"
                     "}}\n\n",
                     n, M_, result_codes(e).back());
    o += fmt::format("extern \"C\" int {0}_build_conditions_hold(void) {{ return {0}::build_conditions_hold() ? 1 : 0; }}\n",
                     n);
    return o;
}

}  // namespace meander::emit_detail
