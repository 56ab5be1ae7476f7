#include "stream_cost.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <nlohmann/json.hpp>

#include "../runtime/evaluate.hpp"
#include "../runtime/integrate.hpp"
#include "../runtime/stream.hpp"
#include "format.hpp"

namespace meander {

namespace {

// Quantile q of sorted values (nearest rank).
double rank(const std::vector<double>& sorted, double q) {
    const std::size_t i = static_cast<std::size_t>(q * static_cast<double>(sorted.size() - 1) + 0.5);
    return sorted[std::min(i, sorted.size() - 1)];
}

ObservationSpread spread(std::vector<double> v, int failed) {
    ObservationSpread s;
    s.rows = static_cast<int>(v.size()) + failed;
    s.failed_rows = failed;
    if (v.empty()) return s;
    std::sort(v.begin(), v.end());
    s.min = v.front();
    s.max = v.back();
    s.median = rank(v, 0.5);
    s.p95 = rank(v, 0.95);
    return s;
}

std::string spread_text(const ObservationSpread& s) {
    return fmt::format("min {}, median {}, 95th percentile {}, max {}", s.min, s.median, s.p95, s.max);
}

nlohmann::json spread_json(const ObservationSpread& s) {
    return {{"rows", s.rows}, {"failed_rows", s.failed_rows}, {"min", s.min}, {"median", s.median}, {"p95", s.p95}, {"max", s.max}};
}

}  // namespace

std::optional<StreamCost> measure_stream_cost(const Model& model, const std::vector<SequenceRow>& rows,
                                              const CostOptions& opts, Diagnostics& diags) {
    const std::optional<CoreClass> core = core_from_name(opts.core);
    if (!core) {
        diags.error("cost", fmt::format("unknown core class '{}' (known: cortex-m0, cortex-m3, cortex-m4f, cortex-m7)", opts.core));
        return std::nullopt;
    }
    const Stream& st = *model.stream;
    StreamCost c;
    c.model = model.name;
    c.core = *core;
    const CoreFigures& fig = core_figures(*core);
    c.cycles_per_mac = opts.cycles_per_mac >= 0 ? opts.cycles_per_mac : fig.cycles_per_mac;
    c.mac_source = opts.cycles_per_mac >= 0 ? "given with --cycles-per-mac" : fig.mac_source;
    c.largest_gap = st.largest_gap;
    c.evolution = st.evolve.blend ? fmt::format("blend '{}' (closed form, no solver)", st.evolve.name)
                                  : fmt::format("continuous '{}', {}", st.evolve.name, format_solver(st.evolve.solver));
    for_each_model_dense(model, [&](const Dense& d) { c.parameters += dense_macs(d) + (d.has_bias ? d.out : 0); });
    c.macs_per_field_eval = st.evolve.blend ? 0 : field_macs(st.evolve);
    c.worst_field_evals = worst_evolve_field_evals(st);
    for (const Block& b : model.blocks)
        if (b.kind == Block::Kind::continuous) c.worst_field_evals += worst_field_evals(b.continuous.solver);
    c.worst_macs = worst_observation_macs(model);
    c.worst_cycles = static_cast<double>(c.worst_macs) * c.cycles_per_mac;
    if (!rows.empty()) {
        // The readout's own field evaluations are counted with the evolution's; MACs per
        // observation are exact when the readout has no continuous block.
        bool readout_fields = false;
        for (const Block& b : model.blocks) readout_fields = readout_fields || b.kind == Block::Kind::continuous;
        long fixed = 0;
        for_each_dense(st.update_layers, [&](const Dense& d) { fixed += dense_macs(d); });
        for_each_dense(model.blocks, [&](const Dense& d) { fixed += dense_macs(d); });
        if (st.evolve.blend) fixed += field_macs(st.evolve);
        std::vector<double> evals, macs;
        int failed = 0;
        const std::vector<EvalResult> results = evaluate_sequences(model, rows);
        for (const EvalResult& r : results) {
            if (r.status != EvalStatus::ok) {
                ++failed;
                continue;
            }
            evals.push_back(static_cast<double>(r.stats.field_evals));
            macs.push_back(static_cast<double>(fixed) + static_cast<double>(r.stats.field_evals) * static_cast<double>(c.macs_per_field_eval));
        }
        c.field_evals = spread(evals, failed);
        if (!readout_fields) c.macs = spread(macs, failed);
    }
    return c;
}

std::string render_stream_cost_text(const StreamCost& c) {
    std::string o = fmt::format("model {}: a streaming model, cost per observation\n", c.model);
    o += fmt::format("  evolution: {}\n", c.evolution);
    o += fmt::format("  parameters: {}\n", c.parameters);
    o += fmt::format("  worst case, at the largest gap {}:\n", format_number(c.largest_gap));
    o += fmt::format("    field evaluations: {}\n", c.worst_field_evals);
    o += fmt::format("    multiply-accumulates: {:.0Lf}\n", c.worst_macs);
    o += fmt::format("    estimated cycles on {}: {:.0f} (multiply-accumulates only, {} cycles each: {})\n",
                     core_name(c.core), c.worst_cycles, c.cycles_per_mac, c.mac_source);
    if (c.field_evals) {
        o += fmt::format("  measured over {} observations{}:\n", c.field_evals->rows,
                         c.field_evals->failed_rows ? fmt::format(" ({} not ok, left out)", c.field_evals->failed_rows) : "");
        o += fmt::format("    field evaluations: {}\n", spread_text(*c.field_evals));
        if (c.macs) o += fmt::format("    multiply-accumulates: {}\n", spread_text(*c.macs));
    }
    o += "  flash, RAM and stack: not measured for streaming models yet\n";
    return o;
}

std::string render_stream_cost_json(const StreamCost& c) {
    nlohmann::json j = {
        {"model", c.model},
        {"streaming", true},
        {"core", std::string(core_name(c.core))},
        {"evolution", c.evolution},
        {"parameters", c.parameters},
        {"largest_gap", c.largest_gap},
        {"macs_per_field_eval", c.macs_per_field_eval},
        {"worst_field_evals_per_observation", c.worst_field_evals},
        {"worst_macs_per_observation", static_cast<double>(c.worst_macs)},
        {"cycles_per_mac", c.cycles_per_mac},
        {"worst_cycles_per_observation", c.worst_cycles},
    };
    if (c.field_evals) j["measured_field_evals"] = spread_json(*c.field_evals);
    if (c.macs) j["measured_macs"] = spread_json(*c.macs);
    return j.dump(2) + "\n";
}

}  // namespace meander
