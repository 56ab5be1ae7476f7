// Emit: renders NAME.hpp and NAME.cpp from the lowered plan, putting together
// the parts in render.hpp in file order (and the self-test files when asked).
#include <fmt/format.h>

#include <iterator>

#include "render.hpp"

namespace meander {

namespace emit_detail {

namespace {

// The source file: banner, stamp check, build guards, the section and hook
// macros, then every part in the order the compiler needs them.
std::string render_source(const Emission& e, const std::string& stamp, const std::string& c_stamp) {
    const std::string M_ = e.M();
    std::string o = banner(e.model, e.opts, e.model.name + ".cpp");
    o += fmt::format("#include \"{}.hpp\"\n\n#include <cmath>\n#include <cstddef>\n#include <cstdint>\n{}\n", e.model.name,
                     e.p == Precision::float32 ? "#include <cstring>\n" : "");
    // The dense kernels' steps use SSE2 registers on x86 (dense.cpp).
    o += render_dense_includes(e);
    o += fmt::format("#if !defined({}_MEANDER_STAMP) || {}_MEANDER_STAMP != {}\n", M_, M_, stamp);
    o += fmt::format("#error \"{}.hpp is not the header generated with this source: regenerate both\"\n#endif\n\n",
                     e.model.name);
    if (e.p == Precision::float32) {
        o += "static_assert(sizeof(float) == 4, \"this code needs a 32-bit IEEE float\");\n";
        o += fmt::format("static_assert(sizeof({}::real) == 4, \"real must be float\");\n", e.model.name);
    } else {
        o += "static_assert(sizeof(double) == 8, \"this code needs a 64-bit IEEE double\");\n";
        o += fmt::format("static_assert(sizeof({}::real) == 8, \"real must be double\");\n", e.model.name);
    }
    o += "\n";
    o += "// Weights are constant data: with no attribute the linker keeps them in flash. Define\n";
    o += fmt::format("// {}_WEIGHTS_ATTR to place them in a section of your own, e.g.\n", M_);
    o += fmt::format("//   -D'{}_WEIGHTS_ATTR=__attribute__((section(\".rodata.{}\")))'\n", M_, e.model.name);
    o += fmt::format("#ifndef {}_WEIGHTS_ATTR\n#define {}_WEIGHTS_ATTR\n#endif\n\n", M_, M_);
    // A zero-cost default; firmware defines it to read a cycle counter per block.
    o += fmt::format("// Called around every top-level block of infer with the block's name (a string\n"
                     "// literal) and phase 0 before, 1 after it (not after a block that fails). Define\n"
                     "// it to measure each block on the target, e.g. with the DWT cycle counter of a\n"
                     "// Cortex-M3/M4/M7: -D'{0}_BLOCK_HOOK(name, phase)=my_cycle_mark(name, phase)'\n"
                     "#ifndef {0}_BLOCK_HOOK\n#define {0}_BLOCK_HOOK(name, phase) static_cast<void>(0)\n#endif\n\n",
                     M_);
    o += fmt::format("namespace {} {{\n\nnamespace {{\n\n", e.model.name);
    o += render_weights(e);
    o += render_standardisation_tables(e);
    o += render_activations(e);
    if (!e.model.blocks.empty() || e.model.input_info.standardised || e.model.output_info.standardised)
        o += "bool all_finite(const real* v, std::size_t n) noexcept {\n"
             "    for (std::size_t i = 0; i < n; ++i)\n"
             "        if (!std::isfinite(v[i])) return false;\n"
             "    return true;\n"
             "}\n\n";
    o += render_dense_layers(e);
    for (const ContinuousPlan* cp : continuous_plans(e.low)) o += render_continuous(e, *cp);
    o += "}  // namespace\n\n";
    o += render_vector_definitions(e);
    o += render_infer(e);
    o += render_result_name();
    o += render_build_check(e.p);
    o += render_learn_source(e);
    o += fmt::format("}}  // namespace {}\n", e.model.name);
    if (e.opts.c_header) o += render_c_entry(e, c_stamp);
    return o;
}

}  // namespace

}  // namespace emit_detail

std::vector<EmittedFile> emit_model(const Model& model, const EmitOptions& opts) {
    using namespace emit_detail;
    const Emission e(model, opts);
    const std::string hpp = render_header(e);
    const std::string h = opts.c_header ? render_c_header(e) : std::string();
    std::vector<EmittedFile> files;
    files.push_back({model.name + ".hpp", finish_header(hpp)});
    files.push_back({model.name + ".cpp", render_source(e, stamp_of(hpp), opts.c_header ? stamp_of(h) : std::string())});
    if (opts.c_header) files.push_back({model.name + ".h", finish_header(h)});
    if (!opts.self_test_inputs.empty()) {
        std::vector<EmittedFile> st = emit_self_test(model, opts);
        files.insert(files.end(), std::make_move_iterator(st.begin()), std::make_move_iterator(st.end()));
    }
    return files;
}

}  // namespace meander
