// Emit, C callers (EmitOptions.c_header): NAME.h, a plain C header (C99 and
// later; also valid C++), and the extern "C" entry points at the end of
// NAME.cpp that forward to the C++ code. The C side sees the context as an
// opaque block of bytes; the source checks its size and alignment against the
// C++ context, and the header's stamp as it does the C++ header's.
#include <fmt/format.h>

#include <algorithm>

#include "render.hpp"

namespace meander::emit_detail {

namespace {

std::size_t context_bytes(const Emission& e) {
    const std::size_t r = e.p == Precision::float32 ? 4 : 8;
    const std::size_t work = std::max<std::size_t>(e.low.workspace_size, 1) * r;
    const std::size_t raw = work + 3 * 4;  // counters: three uint32
    return (raw + r - 1) / r * r;
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
    o += "/* What the infer function returns (the C++ header's enum result, as an int). Only\n"
         "   with OK does the output hold the model's result. */\n";
    const char* const codes[] = {"OK", "INPUT_NOT_FINITE", "STATE_NOT_FINITE", "STEP_LIMIT", "STEP_TOO_SMALL"};
    for (int i = 0; i < 5; ++i) o += fmt::format("#define {}_{} {}\n", M_, codes[i], i);
    o += "\n/* Work done by the last call of the infer function, summed over the continuous blocks:\n"
         "   field evaluations, accepted steps (every step of a fixed-step block) and rejected\n"
         "   adaptive steps. */\n";
    o += fmt::format("typedef struct {0}_counters {{\n    uint32_t field_evals;\n    uint32_t steps_accepted;\n"
                     "    uint32_t steps_rejected;\n}} {0}_counters;\n\n",
                     n);
    o += fmt::format("/* Everything the infer function writes, owned by the caller (static, on the stack or\n"
                     "   in a pool; one per caller: thread, task, interrupt level). Opaque: {0}_CONTEXT_BYTES\n"
                     "   bytes aligned as a {1} (the source checks both against the C++ context). */\n",
                     M_, e.real_name());
    o += fmt::format("#define {}_CONTEXT_BYTES {}u\n", M_, context_bytes(e));
    o += fmt::format("typedef union {0}_context {{\n    unsigned char bytes[{1}_CONTEXT_BYTES];\n    {0}_real align;\n}} "
                     "{0}_context;\n\n",
                     n, M_);
    o += fmt::format("/* Runs the model on input[0 .. {0}_INPUT_SIZE) into output[0 .. {0}_OUTPUT_SIZE);\n"
                     "   input and output must not overlap. Returns {0}_OK or another result code. */\n",
                     M_);
    o += fmt::format("int {0}_infer({0}_context* context, const {0}_real* input, {0}_real* output);\n\n", n);
    o += fmt::format("/* The counters of the last {0}_infer call on this context. */\n", n);
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
    o += fmt::format("extern \"C\" int {0}_infer({0}_context* context, const {0}_real* input, {0}_real* output) {{\n"
                     "    return static_cast<int>({0}::infer(*reinterpret_cast<{0}::context*>(context), input, output));\n"
                     "}}\n\n",
                     n);
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
                     "    if (result < 0 || result > {1}_STEP_TOO_SMALL) return \"unknown\";\n"
                     "    return {0}::result_name(static_cast<{0}::result>(result));\n"
                     "}}\n\n",
                     n, M_);
    o += fmt::format("extern \"C\" int {0}_build_conditions_hold(void) {{ return {0}::build_conditions_hold() ? 1 : 0; }}\n",
                     n);
    return o;
}

}  // namespace meander::emit_detail
