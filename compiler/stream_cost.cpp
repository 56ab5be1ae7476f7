#include "stream_cost.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <nlohmann/json.hpp>

#include "../runtime/evaluate.hpp"
#include "../runtime/integrate.hpp"
#include "../runtime/stream.hpp"
#include "cost_cycles.hpp"
#include "cost_object.hpp"
#include "emit.hpp"
#include "format.hpp"
#include "lower.hpp"

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

// Field evaluations per part of every observation (evolution 0, update 1, readout
// block i 2 + i), as the cycle measurement counts a layer's runs: the evolution's
// from observe's total less the readout's, each readout block's from running the
// readout block by block on the new state.
std::vector<std::vector<long>> evals_per_part(const Model& model, const std::vector<std::vector<double>>& rows) {
    std::vector<std::vector<long>> out;
    Eigen::VectorXd state;
    for (const auto& row : rows) {
        std::vector<long> per(2 + model.blocks.size(), 0);
        if (row[0] > 0.5) state = Eigen::VectorXd::Zero(model.stream->state_size);
        const Eigen::Map<const Eigen::VectorXd> x(row.data() + 2, static_cast<Eigen::Index>(row.size() - 2));
        const EvalResult r = observe(model, state, x, row[1]);
        if (r.status == EvalStatus::ok) {
            Eigen::VectorXd v = state;  // the new state; the readout again, block by block
            long readout = 0;
            for (std::size_t i = 0; i < model.blocks.size(); ++i) {
                const EvalResult b = evaluate_blocks(std::vector<Block>{model.blocks[i]}, v);
                per[2 + i] = b.stats.field_evals;
                readout += b.stats.field_evals;
                v = b.output;
            }
            per[0] = r.stats.field_evals - readout;
        }
        out.push_back(per);
    }
    return out;
}

// The emitted code's RAM; its code, constants and stack compiled for the core; the
// cycles per observation on the emulated cores.
bool measure_code(const Model& model, const std::vector<SequenceRow>& seq, const CostOptions& opts, StreamCost& c,
                  Diagnostics& diags) {
    const long r = opts.precision == Precision::float32 ? 4 : 8;
    const Lowered low = lower_model(model, opts.precision);
    c.workspace_bytes = static_cast<long>(low.workspace_size) * r;
    // context = { real state[S]; real work[max(W, 1)]; counters count; }, padded to real's alignment.
    c.context_bytes = (model.stream->state_size + std::max<long>(static_cast<long>(low.workspace_size), 1)) * r + 12;
    if (c.context_bytes % r) c.context_bytes += r - c.context_bytes % r;
    CostReport& o = c.object;
    o.model = model.name;
    o.precision = opts.precision;
    o.core = c.core;
    o.real_bytes = static_cast<int>(r);
    o.streaming = true;
    EmitOptions eo = opts.emit;
    eo.precision = opts.precision;
    eo.self_test_inputs.clear();
    eo.self_test_outputs.clear();
    if (eo.meander_version.empty()) eo.meander_version = MEANDER_VERSION;
    const std::vector<EmittedFile> files = emit_stream(model, eo);
    if (!opts.cross_prefix.empty() && on_path(opts.cross_prefix + "g++") && on_path(opts.cross_prefix + "size")) {
        if (!measure_object(model, files, opts, c.core, {}, o, diags)) return false;
    }
    if (!opts.measure_cycles) {
        o.cycles_not_measured = "measurement turned off (--estimate-only)";
        return true;
    }
    if (opts.cross_prefix.empty()) {
        o.cycles_not_measured = "no cross compiler";
        return true;
    }
    std::vector<std::vector<double>> rows;
    for (const SequenceRow& s : seq) {
        std::vector<double> row{s.first ? 1.0 : 0.0, s.gap};
        row.insert(row.end(), s.values.begin(), s.values.end());
        rows.push_back(std::move(row));
    }
    if (rows.empty()) {
        rows.push_back(std::vector<double>(2 + static_cast<std::size_t>(model.input_size), 0.0));
        rows[0][0] = 1.0;
        o.measured_on_zero_row = true;
    }
    CyclesOptions co;
    co.cross_prefix = opts.cross_prefix;
    co.qemu = opts.qemu;
    co.keep_dir = opts.keep_dir.empty() ? "" : opts.keep_dir + "/cycles";
    std::string missing;
    if (!measure_cycles(model, files, {CoreClass::cortex_m4f, CoreClass::cortex_m3, CoreClass::cortex_m7}, rows,
                        evals_per_part(model, rows), co, o.measured_cycles, missing, diags))
        return false;
    if (!missing.empty()) {
        o.cycles_not_measured = fmt::format("{} is not on PATH", missing);
        return true;
    }
    // The worst case's gap: the largest (a fixed-step evolution's most steps), after a reset,
    // with the observation of the file's row with the largest gap (zeros without a file).
    // Cycles depend on the values too (the kernels' paths): this is one such observation.
    std::vector<std::vector<double>> worst{std::vector<double>(2 + static_cast<std::size_t>(model.input_size), 0.0)};
    const SequenceRow* widest = nullptr;
    for (const SequenceRow& s : seq)
        if (!widest || s.gap > widest->gap) widest = &s;
    if (widest) std::copy(widest->values.begin(), widest->values.end(), worst[0].begin() + 2);
    worst[0][0] = 1.0;
    worst[0][1] = model.stream->largest_gap;
    co.keep_dir = opts.keep_dir.empty() ? "" : opts.keep_dir + "/largest-gap";
    return measure_cycles(model, files, {CoreClass::cortex_m4f, CoreClass::cortex_m3, CoreClass::cortex_m7}, worst,
                          evals_per_part(model, worst), co, c.at_largest_gap, missing, diags);
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
    c.state_size = st.state_size;
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
    if (!measure_code(model, rows, opts, c, diags)) return std::nullopt;
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
    const CostReport& ob = c.object;
    const std::string real = ob.real_bytes == 4 ? "float32" : "float64";
    o += fmt::format("  RAM: context {} bytes (state {} bytes, workspace {} bytes, {}; counters 12 bytes)\n", c.context_bytes,
                     c.state_size * ob.real_bytes, c.workspace_bytes, real);
    o += fmt::format("  weights: {} bytes ({} parameters)\n", c.parameters * ob.real_bytes, c.parameters);
    if (ob.code_measured) {
        o += fmt::format("  flash: code {} bytes, constants {} bytes, data {} bytes ({})\n", ob.code_bytes, ob.rodata_bytes,
                         ob.data_bytes, ob.code_tool);
        if (ob.stack_bytes >= 0)
            o += fmt::format("  stack: {} bytes, the deepest chain of emitted functions from observe ({}); observe's own frame {}\n",
                             ob.stack_bytes, fmt::join(ob.stack_chain, " -> "), ob.entry_stack_bytes);
    } else {
        o += "  flash and stack: not measured (no cross compiler on PATH)\n";
    }
    o += render_measured_text(ob);
    if (!c.at_largest_gap.empty()) {
        o += fmt::format("measured at the largest gap {} (one observation after a reset: the values of the file's row with the\n"
                         "largest gap, or zeros):\n",
                         format_number(c.largest_gap));
        for (const MeasuredCycles& m : c.at_largest_gap)
            o += fmt::format("  {}: {:.0f} cycles, {:.0f} instructions\n", core_name(m.core), m.cycles.max, m.instructions.max);
    }
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
    const CostReport& ob = c.object;
    j["precision"] = ob.real_bytes == 4 ? "float32" : "float64";
    j["weight_bytes"] = c.parameters * ob.real_bytes;
    j["workspace_bytes"] = c.workspace_bytes;
    j["context_bytes"] = c.context_bytes;
    j["code_measured"] = ob.code_measured;
    if (ob.code_measured) {
        j["code_tool"] = ob.code_tool;
        j["code_bytes"] = ob.code_bytes;
        j["rodata_bytes"] = ob.rodata_bytes;
        j["data_bytes"] = ob.data_bytes;
        j["entry_stack_bytes"] = ob.entry_stack_bytes;
        j["stack_bytes"] = ob.stack_bytes;
        j["stack_chain"] = ob.stack_chain;
    }
    j["measured"] = nlohmann::json::parse(render_measured_json(ob));
    if (!ob.cycles_not_measured.empty()) j["measured_skipped"] = ob.cycles_not_measured;
    nlohmann::json worst = nlohmann::json::array();
    for (const MeasuredCycles& m : c.at_largest_gap)
        worst.push_back({{"core", std::string(core_name(m.core))}, {"cycles", m.cycles.max}, {"instructions", m.instructions.max}});
    j["measured_at_largest_gap"] = worst;
    return j.dump(2) + "\n";
}

}  // namespace meander
