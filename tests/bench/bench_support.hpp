// What bench_infer.cpp, every emitted-code adaptor and the hand-written
// baselines share: a sample's first input rows with the reference outputs, and
// the benchmark of one inference.
#pragma once

#include <benchmark/benchmark.h>

#include <algorithm>
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <functional>
#include <map>
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
    std::vector<std::uint32_t> reference_evals;  // its field evaluations on each row
};

// How a code's outputs compare with the reference over the rows: the largest
// |output - reference| (NaN when some row did not return ok), and in how many
// rows it made as many field evaluations as the reference. Reported beside the
// timing so that a fast but wrong build, or one doing other work, shows.
struct Agreement {
    double max_abs_diff = 0.0;
    double rows_same_evals = 0.0;
    double row_field_evals = 0.0;   // mean over one pass through the rows
};

template <class Real, class Infer>
Agreement agreement(const Sample& s, const std::vector<Real>& inputs, std::size_t input_size,
                    std::size_t output_size, Infer& infer) {
    std::vector<Real> out(output_size);
    Agreement a;
    for (std::size_t r = 0; r < s.rows.size(); ++r) {
        std::uint32_t evals = 0;
        if (!infer(inputs.data() + r * input_size, out.data(), evals)) return {std::nan(""), 0.0, 0.0};
        for (std::size_t i = 0; i < output_size; ++i)
            a.max_abs_diff = std::max(a.max_abs_diff, std::abs(static_cast<double>(out[i]) - s.reference[r][i]));
        if (r < s.reference_evals.size() && evals == s.reference_evals[r]) a.rows_same_evals += 1.0;
        a.row_field_evals += static_cast<double>(evals) / static_cast<double>(s.rows.size());
    }
    return a;
}

// Plain loops of the registered inferences, by benchmark name: `calls(n)` runs
// n inferences cycling through the rows, outside Google Benchmark, so that
// `bench_infer --calls=NAME:N` under callgrind counts their instructions alone.
inline std::map<std::string, std::function<void(std::size_t)>>& call_loops() {
    static std::map<std::string, std::function<void(std::size_t)>> loops;
    return loops;
}

// Registers `name`: one call of `infer(in, out, field_evals)` (true on ok) per
// iteration, cycling through the sample's rows. MACs per inference: the dense
// layers outside the fields plus macs_per_field_eval for every field
// evaluation the call made. Used for the emitted code ("infer/<sample>/<precision>")
// and the hand-written baselines ("baseline/<sample>").
template <class Real, class Infer>
void register_inference(const Sample& s, const std::string& name, std::size_t input_size, std::size_t output_size,
                        std::uint32_t macs_per_field_eval, std::uint64_t macs_outside_fields, Infer infer) {
    auto inputs = std::make_shared<std::vector<Real>>();
    for (const auto& row : s.rows)
        for (double v : row) inputs->push_back(static_cast<Real>(v));
    const Agreement agree = agreement(s, *inputs, input_size, output_size, infer);
    const std::size_t rows = s.rows.size();
    call_loops()[name] = [=](std::size_t n) mutable {
        std::vector<Real> out(output_size);
        std::uint32_t evals = 0;
        for (std::size_t k = 0, r = 0; k < n; ++k, r = r + 1 == rows ? 0 : r + 1) {
            infer(inputs->data() + r * input_size, out.data(), evals);
            benchmark::DoNotOptimize(out.data());
        }
    };
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
        state.counters["max_abs_diff"] = agree.max_abs_diff;
        state.counters["rows_same_evals"] = agree.rows_same_evals;
        state.counters["row_field_evals"] = agree.row_field_evals;
        state.counters["rows"] = static_cast<double>(rows);
    });
}

template <class Real, class Infer>
void register_emitted(const Sample& s, const char* precision, std::size_t input_size, std::size_t output_size,
                      std::uint32_t macs_per_field_eval, std::uint64_t macs_outside_fields, Infer infer) {
    register_inference<Real>(s, "infer/" + s.name + "/" + precision, input_size, output_size, macs_per_field_eval,
                             macs_outside_fields, infer);
}

}  // namespace meander_bench
