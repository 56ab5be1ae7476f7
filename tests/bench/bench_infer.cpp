// Host benchmarks of one inference: the emitted code of every sample in
// float32 and float64, the reference evaluator on the same rows, and every
// integration method on one fixed neural field at a comparable accuracy.
// Timings are reported, never asserted (README.md says why).
#include <benchmark/benchmark.h>
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <functional>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "baseline_support.hpp"
#include "bench_support.hpp"
#include "compiler/load.hpp"
#include "compiler/source.hpp"
#include "compiler/weights.hpp"
#include "runtime/evaluate.hpp"
#include "runtime/integrate.hpp"
#include "runtime/tableau.hpp"

using RegisterFn = void (*)(const meander_bench::Sample&);

// One registration function per sample and precision, in the emitted libraries.
#define MEANDER_BENCH_SAMPLE(name, desc, inputs)                 \
    void register_##name##_float32(const meander_bench::Sample&); \
    void register_##name##_float64(const meander_bench::Sample&);
#include "bench_samples.inc"
#undef MEANDER_BENCH_SAMPLE

namespace {

namespace fs = std::filesystem;
using namespace meander;

struct SampleEntry {
    const char* name;
    const char* description;
    const char* inputs;
    RegisterFn float32;
    RegisterFn float64;
};

const SampleEntry kSamples[] = {
#define MEANDER_BENCH_SAMPLE(name, desc, inputs) {#name, desc, inputs, register_##name##_float32, register_##name##_float64},
#include "bench_samples.inc"
#undef MEANDER_BENCH_SAMPLE
};

// The hand-written baselines (baseline_<sample>.cpp), by sample folder; each
// reads the weights file the sample's description names (.npz, .safetensors).
struct BaselineEntry {
    const char* sample;
    void (*register_fn)(const meander_bench::Sample&, const meander_bench::baseline::Weights&);
};
const BaselineEntry kBaselines[] = {
#ifdef MEANDER_BENCH_BASELINES
    {"fan_balance", meander_bench::baseline::register_fan_balance},
    {"boiler_ahead", meander_bench::baseline::register_boiler_ahead},
    {"soil_probe", meander_bench::baseline::register_soil_probe},
#endif
    {nullptr, nullptr},
};

bool register_baseline(const meander_bench::Sample& s, const std::string& description) {
    for (const BaselineEntry& b : kBaselines) {
        if (!b.sample || s.name != b.sample) continue;
        Diagnostics diags;
        fs::path file = fs::path(description).parent_path() / (s.name + ".npz");
        for (const char* ext : {".safetensors", ".pt"})
            if (!fs::exists(file)) file.replace_extension(ext);
        auto set = read_weights(file.string(), diags);
        if (!set) {
            std::fputs(diags.render().c_str(), stderr);
            return false;
        }
        b.register_fn(s, meander_bench::baseline::Weights(std::move(*set)));
    }
    return true;
}

// Instructions of `n` calls alone, for callgrind: ratios.sh runs
// `valgrind --tool=callgrind --collect-atstart=no --toggle-collect=<this>`.
__attribute__((noinline)) void counted_calls(const std::function<void(std::size_t)>& loop, std::size_t n) { loop(n); }

// The sample whose continuous block is the field of the method benchmarks.
constexpr const char* kFieldSample = "fan_balance";
// Max |error| of the field's final state that every method is tuned to reach,
// against a dormand-prince solution with tolerances 1e-13.
constexpr double kTargetError = 1e-5;

// The compiler's front, as `meander eval` runs it (compiler/load.hpp).
std::shared_ptr<Model> load_model(const std::string& path) {
    Diagnostics diags;
    auto loaded = meander::load_model(path, Precision::float64, diags);
    if (!loaded) {
        std::fputs(diags.render().c_str(), stderr);
        return nullptr;
    }
    return std::make_shared<Model>(std::move(loaded->model));
}

Eigen::VectorXd to_vector(const std::vector<double>& row) {
    return Eigen::Map<const Eigen::VectorXd>(row.data(), static_cast<Eigen::Index>(row.size()));
}

void register_reference(const std::shared_ptr<Model>& model, const meander_bench::Sample& s) {
    std::vector<Eigen::VectorXd> xs;
    for (const auto& row : s.rows) xs.push_back(to_vector(row));
    const std::string name = "evaluate/" + s.name;
    benchmark::RegisterBenchmark(name.c_str(), [model, xs](benchmark::State& state) {
        long field_evals = 0;
        std::size_t r = 0;
        for (auto _ : state) {
            EvalResult res = evaluate(*model, xs[r]);
            benchmark::DoNotOptimize(res.output.data());
            if (res.status != EvalStatus::ok) {
                state.SkipWithError("evaluate did not return ok");
                break;
            }
            field_evals += res.stats.field_evals;
            r = r + 1 == xs.size() ? 0 : r + 1;
        }
        state.counters["field_evals"] = benchmark::Counter(static_cast<double>(field_evals), benchmark::Counter::kAvgIterations);
    });
}

// --- integration methods on one field ---------------------------------------

struct FieldCase {
    std::shared_ptr<Model> model;
    const Continuous* block = nullptr;
    Eigen::VectorXd y0;          // the block's initial state for the sample's first row
    Eigen::VectorXd y_ref;       // its state at T1, integrated with tight tolerances
};

Field field_of(const Continuous* block) {
    return [block](double t, const Eigen::VectorXd& y, Eigen::VectorXd& dy) { eval_field(*block, t, y, dy); };
}

// Final state and statistics of one integration; nullopt when it failed.
std::optional<Eigen::VectorXd> run(const FieldCase& fc, const SolverSpec& spec, IntegrateStats& stats) {
    Eigen::VectorXd y = fc.y0;
    if (integrate(field_of(fc.block), fc.block->t0, fc.block->t1, y, spec, stats) != IntegrateStatus::ok)
        return std::nullopt;
    return y;
}

double error_of(const FieldCase& fc, const SolverSpec& spec) {
    IntegrateStats stats;
    auto y = run(fc, spec, stats);
    return y ? (*y - fc.y_ref).cwiseAbs().maxCoeff() : INFINITY;
}

SolverSpec adaptive_spec(const std::string& method, double tol) {
    SolverSpec spec;
    spec.method = method;
    spec.rtol = tol;
    spec.atol = tol;
    spec.max_steps = 1000000;
    return spec;
}

// A cheap setting of `t` that reaches kTargetError: for a fixed-step method
// the fewest steps to within 1% (doubling, then bisection: Euler needs about a
// million), for an adaptive one the loosest tolerance on the 1-2-5 grid.
std::optional<SolverSpec> tune_method(const FieldCase& fc, const Tableau& t) {
    if (t.adaptive()) {
        for (int decade = 2; decade <= 13; ++decade) {
            for (double mantissa : {5.0, 2.0, 1.0}) {
                const double tol = std::stod(fmt::format("{}e-{}", mantissa, decade));
                SolverSpec spec = adaptive_spec(std::string(t.key), tol);
                if (error_of(fc, spec) <= kTargetError) return spec;
            }
        }
        return std::nullopt;
    }
    SolverSpec spec;
    spec.method = std::string(t.key);
    auto fits = [&](int steps) {
        spec.steps = steps;
        return error_of(fc, spec) <= kTargetError;
    };
    int hi = 1;
    while (!fits(hi)) {
        if (hi >= (1 << 22)) return std::nullopt;
        hi *= 2;
    }
    int lo = hi / 2;  // does not fit (or is 0)
    while (hi - lo > std::max(1, hi / 100)) {
        const int mid = lo + (hi - lo) / 2;
        (fits(mid) ? hi : lo) = mid;
    }
    spec.steps = hi;
    return spec;
}

std::optional<FieldCase> field_case(const std::shared_ptr<Model>& model, const meander_bench::Sample& s) {
    FieldCase fc;
    fc.model = model;
    Model prefix = *model;  // the blocks before the first continuous one give its initial state
    for (std::size_t i = 0; i < model->blocks.size(); ++i) {
        if (model->blocks[i].kind != Block::Kind::continuous) continue;
        fc.block = &model->blocks[i].continuous;
        prefix.blocks.resize(i);
        break;
    }
    if (!fc.block || s.rows.empty()) return std::nullopt;
    EvalResult head = evaluate(prefix, to_vector(s.rows.front()));
    if (head.status != EvalStatus::ok) return std::nullopt;
    fc.y0 = Eigen::VectorXd::Zero(fc.block->state());
    fc.y0.head(fc.block->width) = head.output;
    IntegrateStats stats;
    auto y = run(fc, adaptive_spec("dormand-prince", 1e-13), stats);
    if (!y) return std::nullopt;
    fc.y_ref = *y;
    return fc;
}

void register_methods(const FieldCase& fc, const std::string& sample) {
    for (const Tableau& t : tableaux()) {
        auto spec = tune_method(fc, t);
        if (!spec) {
            std::fprintf(stderr, "bench_infer: %s does not reach %g on %s's field; left out\n",
                         std::string(t.key).c_str(), kTargetError, sample.c_str());
            continue;
        }
        const double err = error_of(fc, *spec);
        const std::string setting =
            t.adaptive() ? fmt::format("rtol=atol={}", spec->rtol) : fmt::format("steps {}", spec->steps);
        const std::string name = fmt::format("integrate/{}/{}", sample, t.key);
        benchmark::RegisterBenchmark(name.c_str(), [fc, spec = *spec, err, setting](benchmark::State& state) {
            const Field f = field_of(fc.block);
            IntegrateStats stats;
            for (auto _ : state) {
                Eigen::VectorXd y = fc.y0;
                stats = IntegrateStats{};
                integrate(f, fc.block->t0, fc.block->t1, y, spec, stats);
                benchmark::DoNotOptimize(y.data());
            }
            state.SetLabel(setting);
            state.counters["field_evals"] = static_cast<double>(stats.field_evals);
            state.counters["steps_accepted"] = static_cast<double>(stats.steps_accepted);
            state.counters["steps_rejected"] = static_cast<double>(stats.steps_rejected);
            state.counters["max_abs_error"] = err;
            state.counters["target_error"] = kTargetError;
        });
    }
}

}  // namespace

int main(int argc, char** argv) {
    // --calls=NAME:N runs N inferences of benchmark NAME in counted_calls and
    // nothing else (no timing, no method tuning): for instruction counts.
    std::string calls_name;
    std::size_t calls_n = 0;
    for (int i = 1; i < argc; ++i) {
        const std::string a = argv[i];
        if (a.rfind("--calls=", 0) != 0) continue;
        const std::size_t colon = a.rfind(':');
        if (colon == std::string::npos || colon < 8) {
            std::fprintf(stderr, "bench_infer: --calls=NAME:N, e.g. --calls=infer/fan_balance/float32:100\n");
            return 2;
        }
        calls_name = a.substr(8, colon - 8);
        calls_n = static_cast<std::size_t>(std::stoul(a.substr(colon + 1)));
        for (int j = i; j + 1 < argc; ++j) argv[j] = argv[j + 1];
        --argc;
        break;
    }
    benchmark::Initialize(&argc, argv);
    if (benchmark::ReportUnrecognizedArguments(argc, argv)) return 2;
    std::optional<FieldCase> field;
    for (const SampleEntry& e : kSamples) {
        auto model = load_model(e.description);
        if (!model) return 1;
        Diagnostics diags;
        auto rows = read_csv_rows(e.inputs, model->input_size, diags);
        if (!rows) {
            std::fputs(diags.render().c_str(), stderr);
            return 1;
        }
        meander_bench::Sample s;
        s.name = e.name;
        for (std::size_t r = 0; r < rows->size() && r < meander_bench::kRows; ++r) {
            EvalResult ref = evaluate(*model, to_vector((*rows)[r]));
            if (ref.status != EvalStatus::ok) continue;  // a row the model rejects times nothing useful
            s.rows.push_back((*rows)[r]);
            s.reference.emplace_back(ref.output.data(), ref.output.data() + ref.output.size());
            s.reference_evals.push_back(static_cast<std::uint32_t>(ref.stats.field_evals));
        }
        register_reference(model, s);
        e.float32(s);
        e.float64(s);
        if (!register_baseline(s, e.description)) return 1;
        if (calls_name.empty() && s.name == kFieldSample) field = field_case(model, s);
    }
    if (!calls_name.empty()) {
        const auto loop = meander_bench::call_loops().find(calls_name);
        if (loop == meander_bench::call_loops().end()) {
            std::fprintf(stderr, "bench_infer: no benchmark %s to call\n", calls_name.c_str());
            return 2;
        }
        counted_calls(loop->second, calls_n);
        std::printf("%zu calls of %s\n", calls_n, calls_name.c_str());
        return 0;
    }
    if (field)
        register_methods(*field, kFieldSample);
    else
        std::fprintf(stderr, "bench_infer: no sample %s with a continuous block; no method benchmarks\n", kFieldSample);
    benchmark::RunSpecifiedBenchmarks();
    benchmark::Shutdown();
    return 0;
}
