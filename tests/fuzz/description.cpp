// libFuzzer harness for the description front end: any bytes as a
// description go through parse and check; a description that parses must
// format, and formatting must be idempotent (format(format(x)) == format(x));
// a checked one is bound to made-up weights of the right shapes, lowered and
// emitted in both precisions. A crash, a sanitizer report or a broken property
// (__builtin_trap) is a finding.
#include <cstddef>
#include <cstdint>
#include <string>

#include "compiler/check.hpp"
#include "compiler/emit.hpp"
#include "compiler/format.hpp"
#include "compiler/lower.hpp"
#include "compiler/parse.hpp"
#include "compiler/weights.hpp"

using namespace meander;

namespace {

// Bigger models are checked but not bound or emitted: emitting is linear in
// the parameters and would only slow the search down.
constexpr std::uint64_t kMaxFuzzValues = 1 << 14;

// Made-up weights: small values from a fixed sequence, so a run repeats.
TensorSet made_up_weights(const Model& m) {
    TensorSet set;
    set.path = "made-up";
    std::uint32_t state = 12345;
    auto next = [&]() {
        state = state * 1664525u + 1013904223u;
        return (static_cast<double>(state >> 8) / 16777216.0 - 0.5) * 0.5;
    };
    auto add = [&](const std::string& name, std::vector<std::size_t> shape) {
        if (set.find(name)) return;  // two layers naming one tensor: the shapes are check's business
        Tensor t;
        t.name = name;
        t.dtype = "float32";
        t.shape = std::move(shape);
        std::size_t n = 1;
        for (std::size_t d : t.shape) n *= d;
        for (std::size_t i = 0; i < n; ++i) t.values.push_back(next());
        set.tensors.push_back(std::move(t));
    };
    for_each_model_dense(m, [&](const Dense& d) {
        const auto out = static_cast<std::size_t>(d.out), in = static_cast<std::size_t>(d.in_total());
        add(d.weight_tensor.empty() ? d.name + ".weight" : d.weight_tensor, {out, in});
        if (d.has_bias) add(d.bias_tensor.empty() ? d.name + ".bias" : d.bias_tensor, {out});
    });
    // Standardisation tensors named in the description (a made-up scale may be 0: binding refuses it).
    auto vector = [&](const VectorInfo& info, int size) {
        if (!info.standardised) return;
        if (!info.standardised->mean_tensor.empty()) add(info.standardised->mean_tensor, {static_cast<std::size_t>(size)});
        if (!info.standardised->scale_tensor.empty()) add(info.standardised->scale_tensor, {static_cast<std::size_t>(size)});
    };
    vector(m.input_info, m.input_size);
    vector(m.output_info, m.output_size);
    return set;
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
    const std::string text(reinterpret_cast<const char*>(data), size);
    Source src("fuzz.mnd", text);
    Diagnostics diags;
    auto model = parse_description(src, diags);
    (void)diags.render();

    // Canonical form: whatever parses formats, and formatting it again changes nothing.
    Diagnostics fdiags;
    auto once = format_description(src, fdiags);
    if (model && diags.ok() && !once) __builtin_trap();
    if (once) {
        Source again_src("fuzz-formatted.mnd", *once);
        Diagnostics again_diags;
        auto twice = format_description(again_src, again_diags);
        if (!twice || *twice != *once) __builtin_trap();
    }

    if (!model || !diags.ok()) return 0;
    if (!check_model(*model, src, CheckOptions{}, diags)) return 0;
    (void)diags.render();
    if (bound_values(*model) > kMaxFuzzValues) return 0;

    Diagnostics bdiags;
    const TensorSet set = made_up_weights(*model);
    if (!bind_weights(*model, src, set, bdiags)) return 0;  // one tensor named by two layers of different shapes
    for (Precision p : {Precision::float32, Precision::float64}) {
        EmitOptions opts;
        opts.precision = p;
        opts.content_hash = "fnv1a64:0000000000000000";
        opts.meander_version = "fuzz";
        if (model->stream) {
            opts.c_header = p == Precision::float64;  // the streaming C header in one precision
            (void)emit_stream(*model, opts);
        } else {
            // The C entry point in one precision, a self-test of one vector in the other.
            opts.c_header = p == Precision::float64;
            if (p == Precision::float32) {
                opts.self_test_inputs.assign(1, std::vector<double>(static_cast<std::size_t>(model->input_size), 0.25));
                opts.self_test_outputs.assign(1, std::vector<double>(static_cast<std::size_t>(model->output_size), 0.5));
            }
            (void)lower_model(*model, p);
            (void)emit_model(*model, opts);
        }
    }
    return 0;
}
