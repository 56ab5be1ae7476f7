// What bench_infer.cpp and every emitted-code adaptor share: a sample's first
// input rows with the reference outputs, and the benchmark of one emitted infer.
#pragma once

#include <benchmark/benchmark.h>

#include <algorithm>
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <memory>
#include <string>
#include <vector>

namespace meander_bench {

// Rows per sample: enough to mix easy and hard inputs of the adaptive
// models, few enough that a benchmark's iterations cycle through them often.
inline constexpr std::size_t kRows = 8;

struct Sample {
    std::string name;                            // the folder under samples/
    std::vector<std::vector<double>> rows;       // its first kRows input rows
    std::vector<std::vector<double>> reference;  // `evaluate` on each row (double)
};

// Largest |emitted - reference| over the rows, or NaN when some row did not
// return ok. Reported beside the timing so a fast wrong build shows.
template <class Real, class Infer>
double max_abs_diff(const Sample& s, const std::vector<Real>& inputs, std::size_t input_size,
                    std::size_t output_size, Infer& infer) {
    std::vector<Real> out(output_size);
    std::uint32_t evals = 0;
    double worst = 0.0;
    for (std::size_t r = 0; r < s.rows.size(); ++r) {
        if (!infer(inputs.data() + r * input_size, out.data(), evals)) return std::nan("");
        for (std::size_t i = 0; i < output_size; ++i)
            worst = std::max(worst, std::abs(static_cast<double>(out[i]) - s.reference[r][i]));
    }
    return worst;
}

// Registers "infer/<sample>/<precision>": one call of the emitted infer per
// iteration, cycling through the sample's rows. `infer(in, out, field_evals)`
// returns true on ok. MACs per inference: the dense layers outside the fields
// plus macs_per_field_eval for every field evaluation the call made.
template <class Real, class Infer>
void register_emitted(const Sample& s, const char* precision, std::size_t input_size, std::size_t output_size,
                      std::uint32_t macs_per_field_eval, std::uint64_t macs_outside_fields, Infer infer) {
    auto inputs = std::make_shared<std::vector<Real>>();
    for (const auto& row : s.rows)
        for (double v : row) inputs->push_back(static_cast<Real>(v));
    const double diff = max_abs_diff(s, *inputs, input_size, output_size, infer);
    const std::size_t rows = s.rows.size();
    const std::string name = "infer/" + s.name + "/" + precision;
    benchmark::RegisterBenchmark(name.c_str(), [=](benchmark::State& state) mutable {
        std::vector<Real> out(output_size);
        std::uint64_t field_evals = 0;
        std::size_t r = 0;
        for (auto _ : state) {
            std::uint32_t evals = 0;
            const bool ok = infer(inputs->data() + r * input_size, out.data(), evals);
            benchmark::DoNotOptimize(out.data());
            benchmark::ClobberMemory();
            if (!ok) {
                state.SkipWithError("infer did not return ok");
                break;
            }
            field_evals += evals;
            r = r + 1 == rows ? 0 : r + 1;
        }
        const double macs = static_cast<double>(macs_outside_fields) * static_cast<double>(state.iterations()) +
                            static_cast<double>(macs_per_field_eval) * static_cast<double>(field_evals);
        state.counters["field_evals"] = benchmark::Counter(static_cast<double>(field_evals), benchmark::Counter::kAvgIterations);
        state.counters["macs"] = benchmark::Counter(macs, benchmark::Counter::kAvgIterations);
        state.counters["macs_per_s"] = benchmark::Counter(macs, benchmark::Counter::kIsRate);
        state.counters["max_abs_diff"] = diff;
    });
}

}  // namespace meander_bench
