// Cost, rendered: the report as a text table and as JSON.
#include <fmt/format.h>

#include <algorithm>
#include <nlohmann/json.hpp>

#include "cost.hpp"

namespace meander {

namespace {

std::string precision_name(Precision p) { return p == Precision::float32 ? "float32" : "float64"; }

std::string num(long v) { return v < 0 ? "-" : fmt::format("{}", v); }

std::string spread_text(const EvalSpread& s) {
    return fmt::format("{} / {} / {}", s.min, format_double(s.median), s.max);
}

// A table with a header row; the first column left-aligned, the rest right.
std::string table(const std::vector<std::vector<std::string>>& rows, std::size_t left_columns = 1) {
    std::vector<std::size_t> w;
    for (const auto& r : rows) {
        if (w.size() < r.size()) w.resize(r.size(), 0);
        for (std::size_t i = 0; i < r.size(); ++i) w[i] = std::max(w[i], r[i].size());
    }
    std::string out;
    for (const auto& r : rows) {
        std::string line = "  ";
        for (std::size_t i = 0; i < r.size(); ++i) {
            if (i) line += "  ";
            line += i < left_columns ? fmt::format("{:<{}}", r[i], w[i]) : fmt::format("{:>{}}", r[i], w[i]);
        }
        while (!line.empty() && line.back() == ' ') line.pop_back();
        out += line + "\n";
    }
    return out;
}

std::string cycles_text(double c) { return fmt::format("{:.0f}", c); }

// "ns::result ns::infer(context&, const real*, real*)" -> "ns::infer": the
// qualified name without return type and parameters, for narrow tables.
std::string short_name(const std::string& full) {
    std::string s = full;
    const std::string anon = "(anonymous namespace)";
    for (auto at = s.find(anon); at != std::string::npos; at = s.find(anon)) s.replace(at, anon.size(), "{anonymous}");
    s = s.substr(0, s.find('('));
    int depth = 0;
    for (std::size_t i = s.size(); i-- > 0;) {
        if (s[i] == '>' || s[i] == '}') ++depth;
        if (s[i] == '<' || s[i] == '{') --depth;
        if (s[i] == ' ' && depth == 0) return s.substr(i + 1);
    }
    return s;
}

std::string spread3(const CycleSpread& s) {
    return fmt::format("{:.0f} / {:.0f} / {:.0f}", s.min, s.median, s.max);
}

}  // namespace

std::string render_measured_text(const CostReport& r) {
    const char* per = r.streaming ? "observation" : "inference";
    std::string t;
    if (r.measured_cycles.empty()) {
        t += fmt::format("\nmeasured cycles: none ({}); the figures above are the static estimate only\n",
                         r.cycles_not_measured.empty() ? "no emulated core" : r.cycles_not_measured);
        return t;
    }
    const MeasuredCycles& first = r.measured_cycles.front();
    t += fmt::format("\nmeasured cycles per {} on the emulated cores ({} row{}{}; min / median / max)\n", per, first.rows,
                     first.rows == 1 ? "" : "s", r.measured_on_zero_row ? " of zeros: no --input given" : "");
    std::vector<std::vector<std::string>> rows;
    rows.push_back({"core", "board", "cycles", "instructions", "cycles/MAC", "cycles/activation"});
    for (const MeasuredCycles& m : r.measured_cycles)
        rows.push_back({std::string(core_name(m.core)), m.machine, spread3(m.cycles), spread3(m.instructions),
                        m.dense_cycles_per_mac < 0 ? "-" : fmt::format("{:.2f}", m.dense_cycles_per_mac),
                        m.cycles_per_activation < 0 ? "-" : fmt::format("{:.1f}", m.cycles_per_activation)});
    t += table(rows, 2);
    t += fmt::format("per {} (min / median / max cycles per {})\n", r.streaming ? "part" : "block", per);
    std::vector<std::vector<std::string>> b;
    std::vector<std::string> head{r.streaming ? "part" : "block"};
    for (const MeasuredCycles& m : r.measured_cycles) head.push_back(std::string(core_name(m.core)));
    b.push_back(head);
    for (std::size_t i = 0; i < first.blocks.size(); ++i) {
        std::vector<std::string> row{first.blocks[i].name};
        for (const MeasuredCycles& m : r.measured_cycles)
            row.push_back(i < m.blocks.size() ? spread3(m.blocks[i].cycles) : "-");
        b.push_back(row);
    }
    t += table(b, 1);
    for (const MeasuredCycles& m : r.measured_cycles) {
        std::vector<std::string> kinds;
        for (const auto& [k, c] : m.activation_cycles) kinds.push_back(fmt::format("{} {:.1f}", k, c));
        if (!kinds.empty()) t += fmt::format("  {}: cycles per activation: {}\n", core_name(m.core), fmt::join(kinds, ", "));
        if (!m.unpriced.empty())
            t += fmt::format("  {}: not in the timing table, priced 1 cycle: {}\n", core_name(m.core), fmt::join(m.unpriced, ", "));
    }
    t += "how: the emitted code built with meander's bare-metal board driver, run on qemu's MPS2 boards with\n";
    t += fmt::format("the translation log on; every instruction between the driver's marks around {} priced with:\n",
                     r.streaming ? "observe" : "infer");
    for (const MeasuredCycles& m : r.measured_cycles) {
        t += fmt::format("  {}: {}\n", core_name(m.core), m.timings);
        t += fmt::format("  {:{}}  built with {}; {}\n", "", core_name(m.core).size(), m.compiler, m.emulator);
    }
    t += "  cycles/MAC: the dense layers' own code (loops, bias, stores) per multiply-accumulate;\n"
         "  cycles/activation: the activation kernels per evaluation; the block hook's calls are counted.\n";
    return t;
}

std::string render_cost_text(const CostReport& r) {
    std::string t;
    t += fmt::format("cost of {} ({}, {} bytes per real; code for {})\n\n", r.model, precision_name(r.precision),
                     r.real_bytes, core_name(r.core));

    std::vector<std::vector<std::string>> rows;
    rows.push_back({"block", "kind", "parameters", "weights B", "code B", "RAM B", "MACs/eval", "evals", "MACs"});
    for (const BlockCost& b : r.blocks) {
        const bool cont = b.kind == "continuous";
        rows.push_back({b.name, b.kind, num(b.parameters), num(b.weight_bytes), num(b.code_bytes),
                        num(b.workspace_bytes), cont ? num(b.macs_per_field_eval) : "-",
                        cont ? fmt::format("{}{}", b.field_evals, b.adaptive ? " max" : "") : "-", num(b.macs)});
    }
    if (r.shared_workspace_bytes > 0)
        rows.push_back({"(between blocks)", "", "", "", "", num(r.shared_workspace_bytes), "", "", ""});
    rows.push_back({"total", "", num(r.parameters), num(r.weight_bytes),
                    fmt::format("{}{}", r.code_bytes, r.code_measured ? "" : " est."), num(r.workspace_bytes),
                    num(r.macs_per_field_eval), fmt::format("{}{}", r.field_evals, r.any_adaptive ? " max" : ""),
                    num(r.macs)});
    t += table(rows, 2);
    t += "\n  code B: functions named after the block (code inlined into infer counts in the total only).\n"
         "  RAM B: the block's own buffers; blocks that run one after the other share them,\n"
         "  so the total is the workspace, not the sum. evals: field evaluations per inference\n"
         "  (exact for fixed step; \"max\": the bound max-steps allows). MACs: per inference.\n";

    bool any_measured = r.measured.has_value();
    if (any_measured) {
        t += fmt::format("\nfield evaluations measured over {} input rows (min / median / max){}:\n", r.measured->rows,
                         r.measured->failed_rows ? fmt::format(", {} rows ended with a result other than ok",
                                                               r.measured->failed_rows)
                                                 : "");
        std::vector<std::vector<std::string>> m;
        for (const BlockCost& b : r.blocks)
            if (b.measured) m.push_back({b.name, b.solver, spread_text(*b.measured)});
        m.push_back({"total", "", spread_text(*r.measured)});
        t += table(m, 2);
    }

    t += "\nflash\n";
    if (r.code_measured) {
        t += fmt::format("  code       {:>8} B  .text of the emitted object, measured with\n", r.code_bytes);
        t += fmt::format("                          {}\n", r.code_tool);
        t += fmt::format("  constants  {:>8} B  .rodata (weights {} B, plus coefficients and names)\n", r.rodata_bytes,
                         r.weight_bytes);
        t += fmt::format("  globals    {:>8} B  .data and .bss\n", r.data_bytes);
    } else {
        t += fmt::format("  code       {:>8} B  estimated (no cross compiler on PATH)\n", r.code_bytes);
        t += fmt::format("  weights    {:>8} B  parameters x {} bytes\n", r.weight_bytes, r.real_bytes);
    }
    if (!r.layers.empty()) {
        // Weight tables per dense layer in each storage, so the saving can be read before choosing.
        t += "weight tables per dense layer (weights, and one scale per row for integers; biases apart)\n";
        std::vector<std::vector<std::string>> tables{{"layer", "stored as", "weights", "bytes", "float", "int8", "int16", "saved"}};
        long bytes = 0, real_bytes = 0;
        bool any_int = false;
        for (const LayerStorage& l : r.layers) {
            bytes += l.bytes;
            real_bytes += l.real_bytes;
            any_int = any_int || l.storage != WeightStorage::real;
            tables.push_back({l.name, std::string(weight_storage_name(l.storage)), num(l.weights), num(l.bytes), num(l.real_bytes),
                            num(l.int8_bytes), num(l.int16_bytes), num(l.real_bytes - l.bytes)});
        }
        tables.push_back({"total", "", "", num(bytes), num(real_bytes), "", "", num(real_bytes - bytes)});
        t += table(tables, 2);
        for (const LayerStorage& l : r.layers)
            if (!l.kept_real.empty()) t += fmt::format("  {}: {}\n", l.name, l.kept_real);
        if (!any_int) t += "  (every layer stores reals; weights-as int8 or --weights-as int8 stores integers)\n";
    }
    t += "RAM\n";
    t += fmt::format("  workspace  {:>8} B  workspace_bytes of the emitted header\n", r.workspace_bytes);
    t += fmt::format("  context    {:>8} B  workspace and counters, caller owned\n", r.context_bytes);
    if (r.stack_measured) {
        t += fmt::format("  stack      {:>8} B  deepest chain of emitted functions from infer (-fstack-usage,\n"
                         "                          -fcallgraph-info); infer's own frame {} B\n",
                         r.stack_bytes, r.entry_stack_bytes);
        if (r.stack_chain.size() > 1) {
            std::vector<std::string> names;
            for (const std::string& f : r.stack_chain) names.push_back(short_name(f));
            t += fmt::format("                          chain: {}\n", fmt::join(names, " -> "));
        }
        if (!r.library_calls.empty())
            t += fmt::format("                          plus the library's own frames: {}\n", fmt::join(r.library_calls, ", "));
    } else {
        t += "  stack             -    not measured (no cross compiler on PATH)\n";
    }

    if (!r.functions.empty()) {
        t += "\ncode by function\n";
        std::vector<std::vector<std::string>> f;
        f.push_back({"function", "block", "code B", "frame B"});
        for (const FunctionSize& fn : r.functions)
            f.push_back({short_name(fn.name), fn.block.empty() ? "-" : fn.block, num(fn.code_bytes), num(fn.stack_bytes)});
        t += table(f, 2);
    }

    const bool ints = r.int_macs > 0;
    t += fmt::format("\nestimated cycles per inference = MACs x cycles/MAC{} + activations x their kernel's cycles\n"
                     "  + field evaluations x state width x cycles/state (solver, checks, copies)\n"
                     "({} activation evaluations, worst case; cycles/activation: this model's mean{})\n",
                     ints ? " (integer-weight layers: x cycles/int MAC)" : "", r.activations,
                     ints ? fmt::format("; {} of the {} MACs in integer-weight layers", r.int_macs, r.macs) : "");
    std::vector<std::vector<std::string>> c;
    c.push_back({"core", "cycles/MAC"});
    if (ints) c.back().push_back("cycles/int MAC");
    for (const char* h : {"cycles/activation", "cycles/state", "worst"}) c.back().push_back(h);
    c.back().push_back(r.measured ? "median" : "");
    for (const CoreCycles& cc : r.cycles) {
        if (!cc.estimated) {
            c.push_back({std::string(core_name(cc.core)), "-"});
            if (ints) c.back().push_back("-");
            for (const char* v : {"-", "-", "no figure", ""}) c.back().push_back(v);
            continue;
        }
        // No sourced figure: say so instead of a 0 that reads as "free".
        c.push_back({std::string(core_name(cc.core)), format_double(cc.cycles_per_mac)});
        if (ints) c.back().push_back(format_double(cc.cycles_per_int_mac));
        c.back().push_back(cc.cycles_per_activation > 0 ? fmt::format("{:.1f}", cc.cycles_per_activation) : "not counted");
        c.back().push_back(cc.cycles_per_state_eval > 0 ? format_double(cc.cycles_per_state_eval) : "not counted");
        c.back().push_back(cycles_text(cc.worst));
        c.back().push_back(cc.median ? cycles_text(*cc.median) : "");
    }
    t += table(c, 1);
    t += "figures:\n";
    for (const CoreCycles& cc : r.cycles) {
        if (!cc.estimated) continue;
        const CoreFigures& f = core_figures(cc.core);
        const bool user = cc.core == r.core && r.cycles_per_mac_overridden;
        t += fmt::format("  {}: per MAC: {}\n", core_name(cc.core), user ? "given by the user" : f.mac_source);
        if (ints)
            t += fmt::format("  {:{}}  per integer-weight MAC: {}\n", "", core_name(cc.core).size(), f.int_mac_source);
        if (r.precision == Precision::float32) {
            std::vector<std::string> kinds;
            for (const auto& [k, v] : f.activation_cycles) kinds.push_back(fmt::format("{} {}", k, format_double(v)));
            t += fmt::format("  {:{}}  per activation: {}{}{}\n", "", core_name(cc.core).size(), f.activation_source,
                             kinds.empty() ? "" : fmt::format(" ({}; other kinds {})", fmt::join(kinds, ", "),
                                                              format_double(f.cycles_per_activation)),
                             "");
            t += fmt::format("  {:{}}  per state element and field evaluation: {}\n", "", core_name(cc.core).size(),
                             f.state_eval_source);
        }
    }
    if (r.precision == Precision::float64)
        t += "  float64: the sourced figures are for float32; give cycles per MAC for an estimate\n";
    t += "  (the Cortex-M0 figures: secondary sources, as collected for the project; check them for your part)\n";
    t += render_measured_text(r);
    return t;
}

std::string render_cost_json(const CostReport& r) {
    using json = nlohmann::ordered_json;
    auto opt_num = [](long v) { return v < 0 ? json(nullptr) : json(v); };
    auto spread_json = [](const EvalSpread& s) {
        return json{{"rows", s.rows}, {"failed_rows", s.failed_rows}, {"min", s.min}, {"median", s.median}, {"max", s.max}};
    };
    json j;
    j["model"] = r.model;
    j["precision"] = precision_name(r.precision);
    j["core"] = core_name(r.core);
    j["real_bytes"] = r.real_bytes;
    json blocks = json::array();
    for (const BlockCost& b : r.blocks) {
        json o{{"name", b.name}, {"kind", b.kind}, {"parameters", b.parameters}, {"weight_bytes", b.weight_bytes},
               {"code_bytes", opt_num(b.code_bytes)}, {"workspace_bytes", b.workspace_bytes}, {"macs", b.macs},
               {"int_macs", b.int_macs}, {"activations", b.activations}};
        if (b.kind == "continuous") {
            o["solver"] = b.solver;
            o["adaptive"] = b.adaptive;
            o["macs_per_field_eval"] = b.macs_per_field_eval;
            o["int_macs_per_field_eval"] = b.int_macs_per_field_eval;
            o["field_evals"] = b.field_evals;
            if (b.measured) o["field_evals_measured"] = spread_json(*b.measured);
        }
        blocks.push_back(o);
    }
    j["blocks"] = blocks;
    json layers = json::array();
    for (const LayerStorage& l : r.layers) {
        json o{{"name", l.name},           {"storage", weight_storage_name(l.storage)}, {"weights", l.weights},
               {"bytes", l.bytes},         {"float_bytes", l.real_bytes},                {"int8_bytes", l.int8_bytes},
               {"int16_bytes", l.int16_bytes}};
        if (!l.kept_real.empty()) o["kept_real"] = l.kept_real;
        layers.push_back(o);
    }
    j["weight_tables"] = layers;
    json total{{"parameters", r.parameters},
               {"weight_bytes", r.weight_bytes},
               {"code_bytes", r.code_bytes},
               {"code_measured", r.code_measured},
               {"rodata_bytes", opt_num(r.rodata_bytes)},
               {"data_bytes", opt_num(r.data_bytes)},
               {"workspace_bytes", r.workspace_bytes},
               {"workspace_between_blocks_bytes", r.shared_workspace_bytes},
               {"context_bytes", r.context_bytes},
               {"stack_bytes", opt_num(r.stack_bytes)},
               {"entry_stack_bytes", opt_num(r.entry_stack_bytes)},
               {"macs_per_field_eval", r.macs_per_field_eval},
               {"macs_outside_fields", r.macs_outside_fields},
               {"field_evals", r.field_evals},
               {"field_evals_worst_case", r.any_adaptive},
               {"macs", r.macs},
               {"int_macs", r.int_macs},
               {"activations", r.activations}};
    if (r.measured) total["field_evals_measured"] = spread_json(*r.measured);
    j["total"] = total;
    if (r.code_measured) j["code_tool"] = r.code_tool;
    if (r.stack_measured) {
        j["stack_chain"] = r.stack_chain;
        j["library_calls"] = r.library_calls;
    }
    json fns = json::array();
    for (const FunctionSize& f : r.functions)
        fns.push_back({{"name", f.name}, {"block", f.block.empty() ? json(nullptr) : json(f.block)},
                       {"code_bytes", f.code_bytes}, {"stack_bytes", opt_num(f.stack_bytes)}});
    j["functions"] = fns;
    json cyc = json::array();
    for (const CoreCycles& cc : r.cycles) {
        const CoreFigures& f = core_figures(cc.core);
        const bool user = cc.core == r.core && r.cycles_per_mac_overridden;
        json o{{"core", core_name(cc.core)}, {"estimated", cc.estimated}};
        if (cc.estimated) {
            o["cycles_per_mac"] = cc.cycles_per_mac;
            o["cycles_per_int_mac"] = cc.cycles_per_int_mac;
            o["cycles_per_activation"] = cc.cycles_per_activation;
            o["cycles_per_state_eval"] = cc.cycles_per_state_eval;
            json kinds = json::object();
            for (const auto& [k, v] : f.activation_cycles) kinds[k] = v;
            o["activation_cycles"] = kinds;
            o["worst"] = cc.worst;
            if (cc.median) o["median"] = *cc.median;
        }
        o["mac_source"] = user ? "given by the user" : f.mac_source;
        o["activation_source"] = f.activation_source;
        cyc.push_back(o);
    }
    j["cycles"] = cyc;
    j["measured"] = json::parse(render_measured_json(r));
    if (!r.cycles_not_measured.empty()) j["measured_skipped"] = r.cycles_not_measured;
    return j.dump(2) + "\n";
}

std::string render_measured_json(const CostReport& r) {
    using json = nlohmann::ordered_json;
    auto spread3j = [](const CycleSpread& s) { return json{{"min", s.min}, {"median", s.median}, {"max", s.max}}; };
    json measured = json::array();
    for (const MeasuredCycles& m : r.measured_cycles) {
        json blocks_m = json::array();
        for (const MeasuredBlockCycles& b : m.blocks) blocks_m.push_back({{"name", b.name}, {"cycles", spread3j(b.cycles)}});
        json acts = json::object();
        for (const auto& [k, c] : m.activation_cycles) acts[k] = c;
        measured.push_back({{"core", core_name(m.core)},
                            {"board", m.machine},
                            {"compiler", m.compiler},
                            {"emulator", m.emulator},
                            {"timings", m.timings},
                            {"rows", m.rows},
                            {"rows_of_zeros", r.measured_on_zero_row},
                            {"failed_rows", m.failed_rows},
                            {"cycles", spread3j(m.cycles)},
                            {"instructions", spread3j(m.instructions)},
                            {"blocks", blocks_m},
                            {"dense_cycles_per_mac", m.dense_cycles_per_mac < 0 ? json(nullptr) : json(m.dense_cycles_per_mac)},
                            {"cycles_per_activation", m.cycles_per_activation < 0 ? json(nullptr) : json(m.cycles_per_activation)},
                            {"activation_cycles", acts},
                            {"other_cycles_mean", m.other_cycles},
                            {"unpriced_mnemonics", m.unpriced}});
    }
    return measured.dump();
}

}  // namespace meander
