// `meander tune`: the cheapest solver settings (and, with --weights-sweep, weight
// storage) that keep a model's blocks within the target (compiler/tune.hpp).
#include <fmt/format.h>
#include <unistd.h>

#include <cstdio>
#include <map>

#include "compiler/command_support.hpp"
#include "compiler/cost.hpp"
#include "compiler/deviation.hpp"
#include "compiler/labels.hpp"
#include "compiler/plot.hpp"
#include "compiler/quantise.hpp"
#include "compiler/stream_tune.hpp"
#include "compiler/tune.hpp"

namespace meander::cli {

namespace {

// Bytes of every weight table as the model stores them (integers with their scales) and of the biases.
long stored_weight_bytes(const Model& m, Precision p) {
    long n = 0;
    for_each_model_dense(m, [&](const Dense& d) {
        n += weight_table_bytes(d, d.storage, p) + (d.has_bias ? d.out * storage_bytes(WeightStorage::real, p) : 0);
    });
    return n;
}

// tune over the weight storage too: each storage's model tuned against the reference
// of the model with real weights; the choice is the storage with the fewest weight
// bytes whose every block meets the target, on a tie the fewer field evaluations.
struct StorageTune {
    WeightStorage storage = WeightStorage::real;
    long weight_bytes = 0;
    TuneReport report;
    bool meets = false;             // every block has a chosen candidate
    long field_evals = 0;           // the chosen candidates' worst case, summed over blocks
    std::optional<double> cycles;   // the estimate on the report's core with the chosen solvers (float32)
};

std::string render_storage_choice(const std::vector<StorageTune>& runs, bool json) {
    std::optional<std::size_t> best;
    for (std::size_t i = 0; i < runs.size(); ++i) {
        if (!runs[i].meets) continue;
        if (!best || runs[i].weight_bytes < runs[*best].weight_bytes ||
            (runs[i].weight_bytes == runs[*best].weight_bytes && runs[i].field_evals < runs[*best].field_evals))
            best = i;
    }
    if (json) {
        std::string o = "{\n  \"storages\": [\n";
        for (std::size_t i = 0; i < runs.size(); ++i) {
            std::string rep = render_tune_json(runs[i].report);
            while (!rep.empty() && rep.back() == '\n') rep.pop_back();
            o += fmt::format("    {{\"storage\": \"{}\", \"weight_bytes\": {}, \"meets\": {}, \"field_evals\": {}, "
                             "\"worst_cycles\": {}, \"report\": {}}}{}\n",
                             weight_storage_name(runs[i].storage), runs[i].weight_bytes, runs[i].meets ? "true" : "false",
                             runs[i].field_evals, runs[i].cycles ? fmt::format("{:.0f}", *runs[i].cycles) : "null", rep,
                             i + 1 < runs.size() ? "," : "");
        }
        o += fmt::format("  ],\n  \"chosen\": {}\n}}\n",
                         best ? fmt::format("\"{}\"", weight_storage_name(runs[*best].storage)) : std::string("null"));
        return o;
    }
    std::string o;
    for (const StorageTune& r : runs)
        o += fmt::format("==== weights as {} ({} B of weights, scales and biases)\n{}\n", weight_storage_name(r.storage),
                         r.weight_bytes, render_tune_text(r.report));
    const std::string core = runs.empty() ? std::string() : runs[0].report.core;
    const bool cycles = !runs.empty() && runs[0].report.precision == Precision::float32;
    o += "weight storage and solver (each storage against the reference of the model with real weights";
    o += cycles ? fmt::format("; cycles: the estimate of one inference on the {} at worst, with the solvers chosen)\n", core)
                : std::string(")\n");
    o += fmt::format("  {:<8} {:>12} {:>12}{}  {}\n", "storage", "weight bytes", "field evals",
                     cycles ? fmt::format(" {:>12}", "cycles") : "", "meets the target");
    for (const StorageTune& r : runs)
        o += fmt::format("  {:<8} {:>12} {:>12}{}  {}\n", weight_storage_name(r.storage), r.weight_bytes,
                         r.meets ? std::to_string(r.field_evals) : "-",
                         cycles ? fmt::format(" {:>12}", r.cycles ? fmt::format("{:.0f}", *r.cycles) : "-") : "",
                         r.meets ? "yes" : "no");
    if (best) {
        o += fmt::format("recommended: weights-as {}", weight_storage_name(runs[*best].storage));
        for (const TuneBlock& b : runs[*best].report.blocks) o += fmt::format("; {}: {}", b.name, b.solver_line);
        o += " (the fewest weight bytes that meet the target; a tie goes to the fewer field evaluations)\n";
    } else {
        o += "recommended: none (no storage meets the target with the solvers swept)\n";
    }
    return o;
}

}  // namespace

int cmd_tune(const std::string& model_path, const std::string& input, const std::string& precision, double target,
             const std::vector<std::string>& methods, int sweep, bool json, const std::string& labels_path,
             std::optional<double> metric_slack, const std::string& plot_path, bool whole_sweep, int threads,
             StorageOverride storage, bool storage_sweep, const std::string& core) {
    Diagnostics diags;
    Precision p = precision_of(precision);
    TuneOptions to;
    to.whole_sweep = whole_sweep;
    to.threads = threads;
    to.metric_slack = metric_slack;
    to.target = target;
    to.methods = methods;
    to.max_steps_sweep = sweep;
    to.precision = p;
    to.core = core;
    {
        // A streaming model: its evolution's budget per observation, over a sequence file.
        // (Any other model is loaded again below, with its rows; these diagnostics are then dropped.)
        Diagnostics sd;
        auto loaded = load_model(model_path, p, sd);
        if (loaded && loaded->model.stream) {
            if (storage || storage_sweep) {
                std::fprintf(stderr, "meander tune: --weights-as and --weights-sweep do not handle streaming models yet (the "
                                     "description's weights-as statements apply)\n");
                return kUsageError;
            }
            auto rows = read_sequence_file(input, loaded->model.input_size, loaded->model.stream->largest_gap, sd, false,
                                           loaded->model.input_name, &loaded->model.input_info);
            if (!rows) return flush(sd), kModelError;
            auto rep = tune_stream(loaded->model, *rows, to, sd);
            flush(sd);
            if (!rep) return kModelError;
            std::fputs((json ? render_stream_tune_json(*rep) : render_stream_tune_text(*rep)).c_str(), stdout);
            return 0;
        }
    }
    auto in = load_with_rows(model_path, p, input, diags, "tune", false, storage_sweep ? WeightStorage::real : storage);
    if (!in) return flush(diags), kModelError;
    report_storage_notes(in->loaded, diags);
    if (!labels_path.empty() && !(to.labels = read_labels(labels_path, in->loaded.model, in->rows.size(), diags)))
        return flush(diags), kModelError;
    to.classification = is_classifier(in->loaded.model);
    to.inputs = in->rows;
    // On a terminal, a line that says where a long run is (stderr; the report stays on stdout).
    const bool tty = isatty(fileno(stderr)) != 0;
    if (tty)
        to.progress = [](const TuneProgress& g) {
            std::fprintf(stderr, "\rtune: block %s (%d of %d): candidate %d of at most %d, %.0f s   ", g.block.c_str(),
                         g.block_index, g.blocks, g.done, g.planned, g.seconds);
            std::fflush(stderr);
        };
    // Integer weights: the reference comes from the same description with real weights.
    std::optional<LoadedModel> real;
    bool integers = false;
    for_each_model_dense(in->loaded.model, [&](const Dense& d) { integers = integers || d.storage != WeightStorage::real; });
    if (storage_sweep && !plot_path.empty()) {
        std::fprintf(stderr, "meander tune: --plot draws one sweep; leave it out with --weights-sweep\n");
        return kUsageError;
    }
    if (storage_sweep || integers) {
        real = load_model(model_path, p, diags, true, WeightStorage::real);
        if (!real) return flush(diags), kModelError;
        to.reference_model = &real->model;
    }
    if (storage_sweep) {
        std::vector<StorageTune> runs;
        for (WeightStorage st : {WeightStorage::real, WeightStorage::int16, WeightStorage::int8}) {
            auto m = load_model(model_path, p, diags, true, st);
            if (!m) return flush(diags), kModelError;
            auto r = tune_model(m->model, to, diags);
            if (!r) return flush(diags), kModelError;
            StorageTune t;
            t.storage = st;
            t.weight_bytes = stored_weight_bytes(m->model, p);
            t.meets = true;
            std::map<std::string, long> evals;  // the chosen candidates' worst case by block
            for (const TuneBlock& b : r->blocks) {
                if (!b.chosen) {
                    t.meets = false;
                } else {
                    t.field_evals += b.candidates[*b.chosen].worst_field_evals;
                    evals[b.name] = b.candidates[*b.chosen].worst_field_evals;
                }
            }
            if (t.meets) {
                const Model& mm = m->model;
                t.cycles = estimate_cycles(mm, *core_from_name(core), p, [&](std::size_t i) {
                    const auto e = evals.find(mm.blocks[i].continuous.name);
                    return static_cast<double>(e != evals.end() ? e->second : worst_field_evals(mm.blocks[i].continuous.solver));
                });
            }
            t.report = std::move(*r);
            runs.push_back(std::move(t));
        }
        if (tty) std::fputs("\n", stderr);
        flush(diags);
        std::fputs(render_storage_choice(runs, json).c_str(), stdout);
        return 0;
    }
    auto rep = tune_model(in->loaded.model, to, diags);
    if (tty) std::fputs("\n", stderr);
    if (rep && !plot_path.empty() && !write_file_atomic(plot_path, render_tune_svg(*rep), diags)) rep.reset();
    flush(diags);
    if (!rep) return kModelError;
    std::fputs((json ? render_tune_json(*rep) : render_tune_text(*rep)).c_str(), stdout);
    return 0;
}

}  // namespace meander::cli
