#include "stream_tune.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cfloat>
#include <cmath>
#include <nlohmann/json.hpp>

#include "../runtime/stream.hpp"
#include "../runtime/tableau.hpp"
#include "cost.hpp"
#include "format.hpp"
#include "stream_cost.hpp"

namespace meander {

namespace {

constexpr const char* kWhere = "tune";

// Steps per unit of time tried for fixed-step methods.
constexpr double kRates[] = {0.25, 0.5, 1, 2, 3, 4, 6, 8, 12, 16, 24, 32, 48, 64, 96, 128};

StreamTuneCandidate run(Model& model, const std::vector<SequenceRow>& rows, const SolverSpec& spec,
                        const std::vector<EvalResult>& ref, double target) {
    StreamTuneCandidate c;
    c.spec = spec;
    model.stream->evolve.solver = spec;
    c.worst_field_evals = worst_evolve_field_evals(*model.stream);
    const std::vector<EvalResult> got = evaluate_sequences(model, rows);
    c.ok = true;
    long total = 0;
    for (std::size_t i = 0; i < got.size(); ++i) {
        if (got[i].status != EvalStatus::ok) {
            c.ok = false;
            c.failure = std::string(eval_status_name(got[i].status));
            c.failure_row = static_cast<int>(i);
            break;
        }
        total += got[i].stats.field_evals;
        c.max_field_evals = std::max(c.max_field_evals, got[i].stats.field_evals);
        const Eigen::VectorXd& r = ref[i].output;
        for (Eigen::Index k = 0; k < r.size(); ++k)
            c.deviation = std::max(c.deviation, std::fabs(got[i].output[k] - r[k]) / std::max(1.0, std::fabs(r[k])));
    }
    c.mean_field_evals = got.empty() ? 0.0 : static_cast<double>(total) / static_cast<double>(got.size());
    c.meets = c.ok && c.deviation <= target;
    return c;
}

}  // namespace

std::optional<StreamTune> tune_stream(const Model& model_in, const std::vector<SequenceRow>& rows, const TuneOptions& opts,
                                      Diagnostics& diags) {
    if (!(opts.target > 0.0) || !std::isfinite(opts.target)) {
        diags.error(kWhere, fmt::format("the target must be a positive finite number, not {}", format_double(opts.target)));
        return std::nullopt;
    }
    const std::optional<CoreClass> core = core_from_name(opts.core);
    if (!core) {
        diags.error(kWhere, unknown_core(opts.core));
        return std::nullopt;
    }
    const Stream& st = *model_in.stream;
    if (st.evolve.blend) {
        diags.error(kWhere, fmt::format("blend '{}' is a closed form: it has no solver budget to tune", st.evolve.name));
        return std::nullopt;
    }
    Model model = model_in;
    StreamTune t;
    t.model = model.name;
    t.evolution = st.evolve.name;
    t.target = opts.target;
    t.largest_gap = st.largest_gap;
    t.rows = static_cast<int>(rows.size());
    t.reference.method = "dormand-prince";
    t.reference.rtol = 1e-12;
    t.reference.atol = 1e-12;
    t.reference.max_steps = 1000000;
    t.reference.written = {"rtol", "atol", "max-steps"};
    model.stream->evolve.solver = t.reference;
    const std::vector<EvalResult> refs = evaluate_sequences(model, rows);
    for (std::size_t i = 0; i < refs.size(); ++i)
        if (refs[i].status != EvalStatus::ok) {
            diags.error(kWhere, fmt::format("row {} of the sequence file: the reference (solver {}) ends with {}", i + 1,
                                            format_solver(t.reference), eval_status_name(refs[i].status)));
            return std::nullopt;
        }
    t.deployed = run(model, rows, st.evolve.solver, refs, opts.target);
    std::vector<std::string> methods = opts.methods;
    if (methods.empty()) methods.push_back(st.evolve.solver.method);
    const double eps = opts.precision == Precision::float32 ? FLT_EPSILON : DBL_EPSILON;
    for (const std::string& m : methods) {
        const Tableau* tab = find_tableau(m);
        if (!tab) {
            diags.error(kWhere, fmt::format("unknown solver method '{}'", m));
            return std::nullopt;
        }
        if (!tab->adaptive()) {
            for (double rate : kRates) {
                SolverSpec s;
                s.method = m;
                s.steps_per_unit = rate;
                s.written = {"steps-per-unit"};
                t.candidates.push_back(run(model, rows, s, refs, opts.target));
            }
            continue;
        }
        for (double rtol = 1e-1; rtol >= std::sqrt(eps) * 0.999; rtol /= 10) {
            SolverSpec s = st.evolve.solver.method == m ? st.evolve.solver : SolverSpec{};
            s.method = m;
            s.rtol = rtol;
            s.atol = rtol * 1e-2;
            if (s.max_steps < 1) s.max_steps = 256;
            s.written = {"rtol", "atol", "max-steps"};
            t.candidates.push_back(run(model, rows, s, refs, opts.target));
        }
    }
    for (std::size_t i = 0; i < t.candidates.size(); ++i)
        if (t.candidates[i].meets &&
            (!t.chosen || t.candidates[i].worst_field_evals < t.candidates[*t.chosen].worst_field_evals))
            t.chosen = i;
    if (t.chosen) t.solver_line = "solver " + format_solver(t.candidates[*t.chosen].spec);
    // Each budget's cycles per observation at worst on the chosen core.
    t.core = opts.core;
    std::vector<StreamTuneCandidate*> all{&t.deployed};
    for (StreamTuneCandidate& k : t.candidates) all.push_back(&k);
    Model with = model_in;
    for (StreamTuneCandidate* c : all) {
        with.stream->evolve.solver = c->spec;
        c->worst_cycles = estimate_worst_observation_cycles(with, *core, opts.precision);
    }
    return t;
}

namespace {

std::string row_text(const StreamTuneCandidate& c) {
    std::string dev = c.ok ? fmt::format("{:.3g}", c.deviation) : fmt::format("{} at row {}", c.failure, c.failure_row + 1);
    return fmt::format("  {:<48} {:>22} {:>12} {:>10.1f} {:>10}{}{}\n", format_solver(c.spec), dev, c.worst_field_evals,
                       c.mean_field_evals, c.max_field_evals,
                       c.worst_cycles ? fmt::format(" {:>12.0f}", *c.worst_cycles) : "", c.meets ? "  meets" : "");
}

nlohmann::json cand_json(const StreamTuneCandidate& c) {
    nlohmann::json j = {{"solver", format_solver(c.spec)},
                        {"ok", c.ok},
                        {"worst_field_evals_per_observation", c.worst_field_evals},
                        {"mean_field_evals_per_observation", c.mean_field_evals},
                        {"max_field_evals_per_observation", c.max_field_evals},
                        {"worst_cycles_per_observation", c.worst_cycles ? nlohmann::json(*c.worst_cycles) : nlohmann::json(nullptr)},
                        {"meets_target", c.meets}};
    if (c.ok) j["deviation"] = c.deviation;
    else j["failure"] = {{"result", c.failure}, {"row", c.failure_row + 1}};
    return j;
}

}  // namespace

std::string render_stream_tune_text(const StreamTune& t) {
    std::string o = fmt::format("model {}: a streaming model; evolution '{}' tuned per observation over {} observations\n",
                                t.model, t.evolution, t.rows);
    o += fmt::format("target: deviation <= {}, the deviation being |out - ref| / max(1, |ref|) over every observation and "
                     "output; reference: solver {}\n",
                     format_double(t.target), format_solver(t.reference));
    const bool cycles = t.deployed.worst_cycles.has_value();
    o += fmt::format("field evaluations per observation: worst case at the largest gap {}, measured mean and largest{}\n",
                     format_number(t.largest_gap),
                     cycles ? fmt::format("; cycles: the estimate of one observation at worst on the {}", t.core) : "");
    o += fmt::format("  {:<48} {:>22} {:>12} {:>10} {:>10}{}\n", "solver", "deviation", "worst", "mean", "largest",
                     cycles ? fmt::format(" {:>12}", "cycles") : "");
    o += row_text(t.deployed);
    o += "  candidates:\n";
    for (const auto& c : t.candidates) o += row_text(c);
    if (t.chosen)
        o += fmt::format("recommended: {}  ({} field evaluations per observation at worst{})\n", t.solver_line,
                         t.candidates[*t.chosen].worst_field_evals,
                         t.candidates[*t.chosen].worst_cycles
                             ? fmt::format(", about {:.0f} cycles on the {}", *t.candidates[*t.chosen].worst_cycles, t.core)
                             : "");
    else
        o += fmt::format("no candidate meets the target {}\n", format_double(t.target));
    return o;
}

std::string render_stream_tune_json(const StreamTune& t) {
    nlohmann::json j = {{"model", t.model}, {"streaming", true}, {"evolution", t.evolution}, {"target", t.target}, {"core", t.core},
                        {"largest_gap", t.largest_gap}, {"rows", t.rows}, {"reference", format_solver(t.reference)},
                        {"deployed", cand_json(t.deployed)}};
    j["candidates"] = nlohmann::json::array();
    for (const auto& c : t.candidates) j["candidates"].push_back(cand_json(c));
    if (t.chosen) j["recommended"] = t.solver_line;
    return j.dump(2) + "\n";
}

}  // namespace meander
