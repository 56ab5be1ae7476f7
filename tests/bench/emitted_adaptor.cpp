// Compiled once per sample and precision, inside that emitted library (see
// CMakeLists.txt for the macros): registers the benchmark of its infer.
#include MEANDER_BENCH_HEADER

#include "bench_support.hpp"

namespace emitted = MEANDER_BENCH_NS;

void MEANDER_BENCH_REGISTER(const meander_bench::Sample& sample);

void MEANDER_BENCH_REGISTER(const meander_bench::Sample& sample) {
    // The context lives on the heap here only because the benchmark copies its
    // callable; emitted code itself never allocates.
    auto ctx = std::make_shared<emitted::context>();
    auto infer = [ctx](const emitted::real* in, emitted::real* out, std::uint32_t& field_evals) {
        const emitted::result r = emitted::infer(*ctx, in, out);
        field_evals = ctx->count.field_evals;
        return r == emitted::result::ok;
    };
    const std::uint64_t outside = emitted::worst_macs - static_cast<std::uint64_t>(emitted::macs_per_field_eval) *
                                                            emitted::worst_field_evals;
    meander_bench::register_emitted<emitted::real>(sample, MEANDER_BENCH_PRECISION, emitted::input_size,
                                                   emitted::output_size, emitted::macs_per_field_eval, outside, infer);
}
