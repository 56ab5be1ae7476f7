#include "learn_cost.hpp"

#include <fmt/format.h>

#include <nlohmann/json.hpp>

#include "../runtime/evaluate.hpp"
#include "cost_cycles.hpp"
#include "selftest.hpp"

namespace meander {

std::optional<LearnCycles> measure_learn_cycles(const Model& model, const EmitOptions& learning,
                                                const std::vector<std::vector<double>>& inputs,
                                                const std::optional<Labels>& labels, const CostOptions& opts,
                                                Diagnostics& diags) {
    LearnCycles lc;
    if (!opts.measure_cycles) {
        lc.not_measured = "measurement turned off (--estimate-only)";
        return lc;
    }
    if (opts.cross_prefix.empty()) {
        lc.not_measured = "no cross compiler";
        return lc;
    }
    std::vector<std::vector<double>> in = inputs;
    if (in.empty()) {
        in.assign(1, std::vector<double>(static_cast<std::size_t>(model.input_size), 0.0));
        lc.rows_of_zeros = true;
    }
    // Each row: the inputs, then the targets.
    std::vector<std::vector<double>> rows;
    if (labels) {
        lc.targets = labels->path;
        for (std::size_t r = 0; r < in.size() && r < labels->rows.size(); ++r) {
            std::vector<double> row = in[r];
            row.insert(row.end(), labels->rows[r].data(), labels->rows[r].data() + labels->rows[r].size());
            rows.push_back(std::move(row));
        }
    } else {
        lc.targets = "the reference evaluation's outputs of the same rows";
        for (const std::vector<double>& x : in) {
            const EvalResult e = evaluate(model, Eigen::Map<const Eigen::VectorXd>(x.data(), static_cast<Eigen::Index>(x.size())));
            if (e.status != EvalStatus::ok) continue;  // no target to learn towards
            std::vector<double> row = x;
            row.insert(row.end(), e.output.data(), e.output.data() + e.output.size());
            rows.push_back(std::move(row));
        }
        if (rows.empty()) {
            diags.error("cost", "no input row evaluates, so there is no target for a learning step");
            return std::nullopt;
        }
    }

    EmitOptions eo = learning;
    eo.precision = opts.precision;
    eo.self_test_inputs.clear();
    eo.self_test_outputs.clear();
    eo.c_header = false;
    if (eo.meander_version.empty()) eo.meander_version = MEANDER_VERSION;
    const std::vector<EmittedFile> files = emit_model(model, eo);

    CyclesOptions co;
    co.cross_prefix = opts.cross_prefix;
    co.qemu = opts.qemu;
    co.keep_dir = opts.keep_dir.empty() ? "" : opts.keep_dir + "/learn_cycles";
    co.learning = true;
    co.rate = emit_detail::real_literal(lc.rate, opts.precision);
    co.clip = emit_detail::real_literal(lc.clip, opts.precision);
    std::string missing;
    if (!measure_cycles(model, files, {CoreClass::cortex_m4f, CoreClass::cortex_m3, CoreClass::cortex_m7}, rows, {}, co,
                        lc.measured, missing, diags))
        return std::nullopt;
    if (!missing.empty()) lc.not_measured = fmt::format("{} is not on PATH", missing);
    return lc;
}

namespace {

std::string spread_text(const CycleSpread& s) {
    return fmt::format("{:.0f} / {:.0f} / {:.0f}", s.min, s.median, s.max);
}

}  // namespace

std::string render_learn_cycles_text(const LearnCycles& c) {
    std::string o;
    if (c.measured.empty()) {
        o += fmt::format("  cycles                  not measured: {}\n", c.not_measured);
        return o;
    }
    o += fmt::format("  cycles per learning step, measured on emulated cores (min / median / max; learn_step with "
                     "rate {} and clip {}, targets: {}{}):\n",
                     c.rate, c.clip, c.targets, c.rows_of_zeros ? "; one row of zeros, no --input given" : "");
    for (const MeasuredCycles& m : c.measured) {
        o += fmt::format("    {:<11} {:<11} {:>3} steps  step {}  forward part {}  instructions per step {}{}\n",
                         core_name(m.core), m.machine, m.rows, spread_text(m.cycles), spread_text(m.forward_cycles),
                         spread_text(m.instructions),
                         m.failed_rows > 0 ? fmt::format("  ({} calls not ok)", m.failed_rows) : std::string());
    }
    return o;
}

std::string render_learn_cycles_json(const LearnCycles& c) {
    using json = nlohmann::ordered_json;
    auto spread3j = [](const CycleSpread& s) { return json{{"min", s.min}, {"median", s.median}, {"max", s.max}}; };
    json measured = json::array();
    for (const MeasuredCycles& m : c.measured)
        measured.push_back({{"core", core_name(m.core)},
                            {"board", m.machine},
                            {"compiler", m.compiler},
                            {"emulator", m.emulator},
                            {"timings", m.timings},
                            {"steps", m.rows},
                            {"rows_of_zeros", c.rows_of_zeros},
                            {"failed_calls", m.failed_rows},
                            {"cycles", spread3j(m.cycles)},
                            {"instructions", spread3j(m.instructions)},
                            {"forward_cycles", spread3j(m.forward_cycles)},
                            {"forward_instructions", spread3j(m.forward_instructions)},
                            {"unpriced_mnemonics", m.unpriced}});
    json j = json::object();
    j["rate"] = c.rate;
    j["clip"] = c.clip;
    j["targets"] = c.targets;
    j["measured"] = measured;
    if (!c.not_measured.empty()) j["measured_skipped"] = c.not_measured;
    std::string s = j.dump();
    return s.substr(1, s.size() - 2);
}

}  // namespace meander
