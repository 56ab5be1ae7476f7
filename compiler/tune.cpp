#include "tune.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <chrono>
#include <cfloat>
#include <cmath>
#include <iterator>
#include <nlohmann/json.hpp>

#include "../runtime/evaluate.hpp"
#include "../runtime/integrate.hpp"
#include "../runtime/standardise.hpp"
#include "../runtime/tableau.hpp"
#include "cost.hpp"
#include "format.hpp"
#include "parallel.hpp"

namespace meander {

namespace {

constexpr const char* kWhere = "tune";
// Reference: tight enough that its own error sits far below any useful target.
constexpr double kReferenceTol = 1e-12;
constexpr int kReferenceMaxSteps = 1000000;
// Adaptive candidates are first run with this limit to see how many attempts they need.
constexpr int kMeasureMaxSteps = 1000000;
// The decades swept for adaptive methods; literals so they print as written.
// atol = rtol * 1e-2, also written out: the product in double is not always the literal.
constexpr double kRtolDecades[] = {1e-1, 1e-2, 1e-3, 1e-4, 1e-5, 1e-6, 1e-7};
constexpr double kAtolDecades[] = {1e-3, 1e-4, 1e-5, 1e-6, 1e-7, 1e-8, 1e-9};

// 1, 2, 3, 4, 6, 8, 12, 16, ...: powers of two and 1.5 times them, a factor
// of about 1.4 apart, so the chosen N is never far above the smallest that works.
std::vector<int> step_grid(int max_steps) {
    std::vector<int> grid;
    if (max_steps >= 1) grid.push_back(1);
    for (long p = 2; p <= max_steps; p *= 2) {
        grid.push_back(static_cast<int>(p));
        if (p + p / 2 <= max_steps) grid.push_back(static_cast<int>(p + p / 2));
    }
    return grid;
}

double rtol_floor(Precision p) { return std::sqrt(p == Precision::float32 ? double{FLT_EPSILON} : DBL_EPSILON); }

SolverSpec fixed_spec(const std::string& method, int steps) {
    SolverSpec s;
    s.method = method;
    s.steps = steps;
    s.written = {"steps"};
    return s;
}

void mark_written(SolverSpec& s, const char* key) {
    if (std::find(s.written.begin(), s.written.end(), key) == s.written.end()) s.written.push_back(key);
}

// An adaptive candidate keeps the deployed step-size control when it is the same method.
SolverSpec adaptive_spec(const std::string& method, const SolverSpec& deployed, double rtol, double atol) {
    SolverSpec s;
    if (deployed.method == method) s = deployed;
    s.method = method;
    s.steps = 0;
    s.rtol = rtol;
    s.atol = atol;
    mark_written(s, "rtol");
    mark_written(s, "atol");
    mark_written(s, "max-steps");
    return s;
}

// The model split around one continuous block: what runs before it (once per
// row, with the deployed solvers) and what runs after it.
struct Split {
    Model before;
    const Continuous* block = nullptr;
    Model after;
};

Split split_at(const Model& model, std::size_t index) {
    Split s;
    s.before = model;
    s.before.blocks.assign(model.blocks.begin(), model.blocks.begin() + static_cast<std::ptrdiff_t>(index));
    s.block = &model.blocks[index].continuous;
    s.after = model;
    s.after.blocks.assign(model.blocks.begin() + static_cast<std::ptrdiff_t>(index) + 1, model.blocks.end());
    s.after.input_size = s.block->state();
    drop_output_standardisation(s.before);  // the split's parts: the input's scaling before, the output's after
    drop_input_standardisation(s.after);
    return s;
}

struct Run {
    EvalStatus status = EvalStatus::ok;
    std::string block;              // the block that failed
    Eigen::VectorXd output;
    IntegrateStats stats;           // of the tuned block only
};

// The tuned block with `spec` from the block's input `x`, then the rest of the model.
Run run_block(const Split& sp, const Eigen::VectorXd& x, const SolverSpec& spec) {
    Run r;
    const Continuous& c = *sp.block;
    Eigen::VectorXd y = Eigen::VectorXd::Zero(c.state());
    y.head(c.width) = x;
    const Field field = [&c](double t, const Eigen::VectorXd& state, Eigen::VectorXd& dstate) {
        eval_field(c, t, state, dstate);
    };
    const IntegrateStatus s = integrate(field, c.t0, c.t1, y, spec, r.stats);
    if (s != IntegrateStatus::ok || !y.allFinite()) {
        r.status = s != IntegrateStatus::ok ? eval_status_of(s) : EvalStatus::state_not_finite;
        r.block = c.name;
        return r;
    }
    EvalResult rest = evaluate(sp.after, y);
    if (rest.status != EvalStatus::ok) {
        r.status = rest.status;
        // A non-finite state handed on shows up as input_not_finite of the rest.
        r.block = rest.block.empty() ? c.name : rest.block;
        if (rest.status == EvalStatus::input_not_finite) r.status = EvalStatus::state_not_finite;
        return r;
    }
    r.output = rest.output;
    return r;
}

int threads_of(const TuneOptions& opts) { return opts.threads > 0 ? opts.threads : hardware_threads(); }

// Runs `spec` on every row and fills the candidate's deviation and counts.
// The rows run on threads; the reduction walks them in row order, so the
// candidate is the same whatever the thread count (the first failing row wins).
void measure(const Split& sp, const std::vector<Eigen::VectorXd>& block_inputs,
             const std::vector<Eigen::VectorXd>& refs, const TuneOptions& opts, TuneCandidate& cand) {
    cand.ok = true;
    cand.deviation = 0.0;
    std::vector<Run> runs(block_inputs.size());
    parallel_for(block_inputs.size(), threads_of(opts),
                 [&](std::size_t row) { runs[row] = run_block(sp, block_inputs[row], cand.spec); });
    std::vector<Eigen::VectorXd> outputs;
    for (std::size_t row = 0; row < runs.size(); ++row) {
        const Run& r = runs[row];
        cand.measured_field_evals = std::max(cand.measured_field_evals, r.stats.field_evals);
        cand.max_attempts = std::max(cand.max_attempts, r.stats.steps_accepted + r.stats.steps_rejected);
        if (r.status != EvalStatus::ok) {
            cand.ok = false;
            cand.failure = std::string(eval_status_name(r.status));
            cand.failure_row = static_cast<int>(row);
            cand.failure_block = r.block;
            return;
        }
        if (opts.labels) outputs.push_back(r.output);
        const Eigen::VectorXd& ref = refs[row];
        for (Eigen::Index i = 0; i < ref.size(); ++i) {
            const double d = std::fabs(r.output[i] - ref[i]) / std::max(1.0, std::fabs(ref[i]));
            // Written so that a NaN deviation also counts as the worst.
            if (!(d <= cand.deviation)) {
                cand.deviation = d;
                cand.worst_row = static_cast<int>(row);
                cand.worst_output = static_cast<int>(i);
            }
        }
    }
    if (opts.labels) cand.metric = task_metric(opts.classification, outputs, *opts.labels);
}

// `deployed`: the deployed solver's metric, for the metric rule (nullptr while measuring the deployed one).
void finish(TuneCandidate& cand, long field_macs, const TuneOptions& opts, const TuneCandidate* deployed) {
    cand.worst_field_evals = worst_field_evals(cand.spec);
    cand.worst_macs = static_cast<long long>(field_macs) * cand.worst_field_evals;
    if (opts.metric_slack && opts.labels) {
        const TuneCandidate& base = deployed ? *deployed : cand;
        cand.meets = cand.ok && cand.metric && base.metric &&
                     cand.metric->score <= base.metric->score * (1.0 + *opts.metric_slack);
    } else {
        cand.meets = cand.ok && cand.deviation <= opts.target;
    }
}

TuneCandidate fixed_candidate(const Split& sp, const std::vector<Eigen::VectorXd>& xs,
                              const std::vector<Eigen::VectorXd>& refs, const std::string& method, int steps,
                              long field_macs, const TuneOptions& opts, const TuneCandidate& deployed) {
    TuneCandidate cand;
    cand.spec = fixed_spec(method, steps);
    measure(sp, xs, refs, opts, cand);
    finish(cand, field_macs, opts, &deployed);
    return cand;
}

TuneCandidate adaptive_candidate(const Split& sp, const std::vector<Eigen::VectorXd>& xs,
                                 const std::vector<Eigen::VectorXd>& refs, const std::string& method, double rtol,
                                 double atol, long field_macs, const TuneOptions& opts, const TuneCandidate& deployed) {
    TuneCandidate cand;
    cand.adaptive = true;
    cand.spec = adaptive_spec(method, sp.block->solver, rtol, atol);
    cand.spec.max_steps = kMeasureMaxSteps;
    measure(sp, xs, refs, opts, cand);
    // The limit: the most attempts any row needed plus 25%, rounded up. A run
    // under a limit it never reaches is the same run, so the deviation stands.
    const long limit = std::max(1L, (5 * cand.max_attempts + 3) / 4);
    cand.spec.max_steps = static_cast<int>(std::min<long>(limit, kMeasureMaxSteps));
    finish(cand, field_macs, opts, &deployed);
    return cand;
}

// Whether `a` is nearer the goal than `b`: smaller deviation, or smaller task metric under the metric rule.
bool closer(const TuneCandidate& a, const TuneCandidate& b, const TuneOptions& opts) {
    if (opts.metric_slack && a.metric && b.metric) return a.metric->score < b.metric->score;
    return a.deviation < b.deviation;
}

// Whether two solver lines integrate differently (max-steps only bounds the work).
bool same_discretisation(const SolverSpec& a, const SolverSpec& b) {
    if (a.method != b.method) return false;
    const Tableau* tb = find_tableau(a.method);
    if (tb != nullptr && !tb->adaptive()) return a.steps == b.steps;
    return a.steps == b.steps && a.rtol == b.rtol && a.atol == b.atol && a.first_step == b.first_step &&
           a.controller == b.controller && a.safety == b.safety && a.min_factor == b.min_factor &&
           a.max_factor == b.max_factor && a.pi_alpha == b.pi_alpha && a.pi_beta == b.pi_beta;
}

bool check_options(const Model& model, const TuneOptions& opts, Diagnostics& diags) {
    bool good = true;
    if (!(opts.target > 0.0) || !std::isfinite(opts.target)) {
        diags.error(kWhere, fmt::format("the target must be a positive finite number, not {}", format_double(opts.target)));
        good = false;
    }
    if (opts.max_steps_sweep < 1) {
        diags.error(kWhere, fmt::format("the step sweep must reach at least 1 step, not {}", opts.max_steps_sweep));
        good = false;
    }
    for (const std::string& m : opts.methods) {
        if (find_tableau(m) == nullptr) {
            std::string known;
            for (const Tableau& t : tableaux()) known += known.empty() ? std::string(t.key) : ", " + std::string(t.key);
            diags.error(kWhere, fmt::format("unknown solver method '{}' (known: {})", m, known));
            good = false;
        }
    }
    if (!core_from_name(opts.core)) {
        diags.error(kWhere, unknown_core(opts.core));
        good = false;
    }
    if (opts.metric_slack && !opts.labels) {
        diags.error(kWhere, "choosing by the task metric needs labels (--labels)");
        good = false;
    }
    if (opts.metric_slack && !(*opts.metric_slack >= 0.0 && std::isfinite(*opts.metric_slack))) {
        diags.error(kWhere, fmt::format("the metric slack must be a finite number at or above 0, not {}",
                                        format_double(*opts.metric_slack)));
        good = false;
    }
    if (opts.labels && opts.labels->rows.size() != opts.inputs.size()) {
        diags.error(kWhere, fmt::format("{} label rows for {} input rows", opts.labels->rows.size(), opts.inputs.size()));
        good = false;
    }
    if (opts.inputs.empty()) {
        diags.error(kWhere, "no input rows: tuning compares outputs on at least one input");
        good = false;
    }
    for (std::size_t r = 0; r < opts.inputs.size(); ++r) {
        const auto& row = opts.inputs[r];
        if (row.size() != static_cast<std::size_t>(model.input_size)) {
            diags.error(kWhere, fmt::format("input row {} has {} values, the model's input {} has {}", r + 1,
                                            row.size(), model.input_name, model.input_size));
            good = false;
            break;
        }
        if (!std::all_of(row.begin(), row.end(), [](double v) { return std::isfinite(v); })) {
            diags.error(kWhere, fmt::format("input row {} holds a value that is not finite", r + 1));
            good = false;
            break;
        }
    }
    return good;
}

// Tunes block `index`; false (with a diagnostic) when the rows cannot reach
// the block or the reference fails.
// Where tune_block reports progress: which block of how many, and the clock.
struct ProgressClock {
    int block_index = 0;
    int blocks = 0;
    std::chrono::steady_clock::time_point start;
};

// How many candidates a block's sweep tries at most.
int planned_candidates(const std::vector<std::string>& methods, const TuneOptions& opts, double floor) {
    int n = 0;
    for (std::size_t mi = 0; mi < methods.size(); ++mi) {
        const Tableau* tb = find_tableau(methods[mi]);
        if (tb == nullptr || std::find(methods.begin(), methods.begin() + static_cast<std::ptrdiff_t>(mi), methods[mi]) !=
                                 methods.begin() + static_cast<std::ptrdiff_t>(mi))
            continue;
        if (!tb->adaptive())
            n += static_cast<int>(step_grid(opts.max_steps_sweep).size());
        else
            for (double r : kRtolDecades) n += r >= floor ? 1 : 0;
    }
    return n;
}

// Tunes block `index`; false (with a diagnostic) when the rows cannot reach
// the block or the reference fails.
bool tune_block(const Model& model, std::size_t index, const TuneOptions& opts, const std::vector<Eigen::VectorXd>& rows,
                double floor, const ProgressClock& clock, TuneBlock& out, Diagnostics& diags) {
    const Split sp = split_at(model, index);
    const Continuous& c = *sp.block;
    out.name = c.name;
    out.state = c.state();
    out.field_macs = field_macs(c);
    out.trained = c.trained;
    const int threads = threads_of(opts);

    // The block's inputs: what the blocks before it give, in the model and (when the
    // model stores integer weights) in the same model with real weights, the reference's.
    const Split ref_sp = opts.reference_model ? split_at(*opts.reference_model, index) : sp;
    const auto block_inputs = [&](const Split& from, std::vector<Eigen::VectorXd>& into) {
        std::vector<EvalResult> befores(rows.size());
        parallel_for(rows.size(), threads, [&](std::size_t r) { befores[r] = evaluate(from.before, rows[r]); });
        for (std::size_t r = 0; r < rows.size(); ++r) {
            const EvalResult& before = befores[r];
            if (before.status != EvalStatus::ok) {
                diags.error(kWhere, fmt::format("input row {}: block {} (before {}) ends with {} under its deployed solver",
                                                r + 1, before.block, c.name, eval_status_name(before.status)));
                return false;
            }
            into.push_back(before.output);
        }
        return true;
    };
    std::vector<Eigen::VectorXd> xs, ref_xs;
    if (!block_inputs(sp, xs)) return false;
    if (opts.reference_model && !block_inputs(ref_sp, ref_xs)) return false;
    const std::vector<Eigen::VectorXd>& reference_inputs = opts.reference_model ? ref_xs : xs;

    out.reference.method = "dormand-prince";
    out.reference.rtol = kReferenceTol;
    out.reference.atol = kReferenceTol;
    out.reference.max_steps = kReferenceMaxSteps;
    out.reference.written = {"rtol", "atol", "max-steps"};
    std::vector<Run> ref_runs(xs.size());
    parallel_for(xs.size(), threads,
                 [&](std::size_t r) { ref_runs[r] = run_block(ref_sp, reference_inputs[r], out.reference); });
    std::vector<Eigen::VectorXd> refs;
    for (std::size_t r = 0; r < xs.size(); ++r) {
        const Run& run = ref_runs[r];
        if (run.status != EvalStatus::ok) {
            diags.error(kWhere, fmt::format("input row {}: the reference for block {} (solver {}) ends with {} in block {}",
                                            r + 1, c.name, format_solver(out.reference),
                                            eval_status_name(run.status), run.block));
            return false;
        }
        out.reference_field_evals = std::max(out.reference_field_evals, run.stats.field_evals);
        refs.push_back(run.output);
    }
    ref_runs.clear();

    out.deployed.spec = c.solver;
    const Tableau* own = find_tableau(c.solver.method);
    out.deployed.adaptive = own != nullptr && own->adaptive() && c.solver.steps == 0;
    measure(sp, xs, refs, opts, out.deployed);
    finish(out.deployed, out.field_macs, opts, nullptr);

    std::vector<std::string> methods = opts.methods;
    if (methods.empty()) methods.push_back(c.solver.method);
    TuneProgress progress;
    progress.block = c.name;
    progress.block_index = clock.block_index;
    progress.blocks = clock.blocks;
    progress.planned = planned_candidates(methods, opts, floor);
    const auto report_progress = [&] {
        if (!opts.progress) return;
        progress.done += 1;
        progress.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - clock.start).count();
        opts.progress(progress);
    };
    for (std::size_t mi = 0; mi < methods.size(); ++mi) {
        const std::string& m = methods[mi];
        const Tableau* tb = find_tableau(m);
        if (tb == nullptr) continue;  // refused by check_options
        if (std::find(methods.begin(), methods.begin() + static_cast<std::ptrdiff_t>(mi), m) != methods.begin() + static_cast<std::ptrdiff_t>(mi))
            continue;  // named twice: sweep it once
        if (!tb->adaptive()) {
            // The cost grows with N, so the first N that meets is this method's
            // cheapest; two more points show the trend, the rest cannot be chosen.
            std::optional<int> first_meeting;
            int past = 0;
            const std::vector<int> grid = step_grid(opts.max_steps_sweep);
            for (int n : grid) {
                out.candidates.push_back(fixed_candidate(sp, xs, refs, m, n, out.field_macs, opts, out.deployed));
                report_progress();
                if (first_meeting) ++past;
                if (!first_meeting && out.candidates.back().meets) first_meeting = n;
                if (!opts.whole_sweep && first_meeting && past == 2 && n != grid.back()) {
                    out.stopped.push_back(SweepStop{m, *first_meeting, n});
                    break;
                }
            }
        } else {
            for (std::size_t d = 0; d < std::size(kRtolDecades); ++d) {
                if (kRtolDecades[d] < floor) break;
                out.candidates.push_back(
                    adaptive_candidate(sp, xs, refs, m, kRtolDecades[d], kAtolDecades[d], out.field_macs, opts, out.deployed));
                report_progress();
            }
        }
    }

    for (std::size_t i = 0; i < out.candidates.size(); ++i) {
        const TuneCandidate& k = out.candidates[i];
        if (k.ok && (!out.closest || closer(k, out.candidates[*out.closest], opts))) out.closest = i;
        if (!k.meets) continue;
        if (!out.chosen) {
            out.chosen = i;
            continue;
        }
        const TuneCandidate& best = out.candidates[*out.chosen];
        // Fewest worst-case evaluations; on a tie the smaller deviation (or metric).
        if (k.worst_field_evals < best.worst_field_evals ||
            (k.worst_field_evals == best.worst_field_evals && closer(k, best, opts)))
            out.chosen = i;
    }
    if (out.chosen) {
        const SolverSpec& spec = out.candidates[*out.chosen].spec;
        out.solver_line = "solver " + format_solver(spec);
        if (c.trained && !same_discretisation(spec, *c.trained)) {
            out.warnings.push_back(fmt::format(
                "block {} was trained with `trained-with {}`; a network trained with one discretisation can rely on "
                "its error, so changing it can change the model's accuracy (Ott et al., ICLR 2021): check the "
                "accuracy on held-out data before deploying `{}`",
                c.name, format_solver(*c.trained), out.solver_line));
        }
    }
    return true;
}

// Plain text table: columns padded to their widest cell; numbers to the right,
// words (the first column and the last two) to the left.
std::string table(const std::vector<std::vector<std::string>>& rows, const std::string& indent) {
    std::vector<std::size_t> width;
    for (const auto& r : rows)
        for (std::size_t i = 0; i < r.size(); ++i) {
            if (width.size() <= i) width.push_back(0);
            width[i] = std::max(width[i], r[i].size());
        }
    std::string out;
    for (const auto& r : rows) {
        std::string line = indent;
        for (std::size_t i = 0; i < r.size(); ++i) {
            if (i > 0) line += "  ";
            const bool words = i == 0 || i + 2 >= r.size();
            line += words ? fmt::format("{:<{}}", r[i], width[i]) : fmt::format("{:>{}}", r[i], width[i]);
        }
        while (!line.empty() && line.back() == ' ') line.pop_back();
        out += line + "\n";
    }
    return out;
}

std::string deviation_text(double d) { return fmt::format("{:.3e}", d); }

std::string failure_text(const TuneCandidate& k) {
    return fmt::format("{} in {} on row {}", k.failure, k.failure_block, k.failure_row + 1);
}

std::string cycles_text(double c) { return fmt::format("{:.0f}", c); }

std::vector<std::string> candidate_row(const TuneCandidate& k, bool chosen, bool labelled) {
    std::vector<std::string> row{format_solver(k.spec)};
    if (k.ok) {
        row.push_back(deviation_text(k.deviation));
    } else {
        row.push_back("-");
    }
    if (labelled) row.push_back(k.metric ? metric_cell(*k.metric) : "-");
    row.push_back(fmt::format("{}", k.worst_field_evals));
    row.push_back(k.ok ? fmt::format("{}", k.measured_field_evals) : "-");
    row.push_back(fmt::format("{}", k.worst_macs));
    if (k.worst_cycles) row.push_back(cycles_text(*k.worst_cycles));
    if (!k.ok)
        row.push_back("fails: " + failure_text(k));
    else
        row.push_back(k.meets ? "yes" : "no");
    row.push_back(chosen ? "<- cheapest" : "");
    return row;
}

std::string precision_name(Precision p) { return p == Precision::float32 ? "float32" : "float64"; }

nlohmann::json candidate_json(const TuneCandidate& k) {
    nlohmann::json j;
    j["solver"] = format_solver(k.spec);
    j["method"] = k.spec.method;
    if (k.adaptive) {
        j["rtol"] = k.spec.rtol;
        j["atol"] = k.spec.atol;
        j["max_steps"] = k.spec.max_steps;
        j["max_attempts"] = k.max_attempts;
    } else {
        j["steps"] = k.spec.steps;
    }
    j["ok"] = k.ok;
    if (k.ok) {
        j["deviation"] = k.deviation;
        j["worst_row"] = k.worst_row;
        j["worst_output"] = k.worst_output;
        j["measured_field_evals"] = k.measured_field_evals;
    } else {
        j["deviation"] = nullptr;
        j["failure"] = {{"result", k.failure}, {"row", k.failure_row}, {"block", k.failure_block}};
    }
    j["worst_field_evals"] = k.worst_field_evals;
    j["worst_macs"] = k.worst_macs;
    j["worst_cycles"] = k.worst_cycles ? nlohmann::json(*k.worst_cycles) : nlohmann::json(nullptr);
    j["meets_target"] = k.meets;
    if (k.metric) {
        const TaskMetric& m = *k.metric;
        j["metric"] = {{"score", m.score}};
        if (m.classification) {
            j["metric"]["accuracy"] = m.accuracy;
            j["metric"]["cross_entropy"] = m.cross_entropy;
        } else {
            j["metric"]["rmse"] = m.rmse;
            j["metric"]["mae"] = m.mae;
        }
    }
    return j;
}

}  // namespace

std::optional<TuneReport> tune_model(const Model& model, const TuneOptions& opts, Diagnostics& diags) {
    if (!check_options(model, opts, diags)) return std::nullopt;
    TuneReport report;
    report.model = model.name;
    report.target = opts.target;
    report.precision = opts.precision;
    report.core = opts.core;
    report.rtol_floor = rtol_floor(opts.precision);
    report.rows = static_cast<int>(opts.inputs.size());
    report.outputs = model.output_size;
    report.labelled = opts.labels.has_value();
    report.classification = opts.classification;
    report.metric_slack = opts.metric_slack;
    report.output_name = model.output_name;

    std::vector<Eigen::VectorXd> rows;
    for (const auto& r : opts.inputs) rows.push_back(Eigen::Map<const Eigen::VectorXd>(r.data(), static_cast<Eigen::Index>(r.size())));

    ProgressClock clock;
    clock.start = std::chrono::steady_clock::now();
    for (const Block& b : model.blocks) clock.blocks += b.kind == Block::Kind::continuous ? 1 : 0;
    for (std::size_t i = 0; i < model.blocks.size(); ++i) {
        if (model.blocks[i].kind != Block::Kind::continuous) continue;
        TuneBlock b;
        clock.block_index += 1;
        if (!tune_block(model, i, opts, rows, report.rtol_floor, clock, b, diags)) return std::nullopt;
        // Each candidate's cycles: this block at the candidate's evaluations, the others deployed.
        const CoreClass core = *core_from_name(opts.core);
        auto cycles = [&](const TuneCandidate& k) {
            return estimate_cycles(model, core, opts.precision, [&](std::size_t j) {
                return static_cast<double>(j == i ? k.worst_field_evals : worst_field_evals(model.blocks[j].continuous.solver));
            });
        };
        b.deployed.worst_cycles = cycles(b.deployed);
        for (TuneCandidate& k : b.candidates) k.worst_cycles = cycles(k);
        report.blocks.push_back(std::move(b));
    }
    return report;
}

std::string render_tune_text(const TuneReport& r) {
    std::string out;
    out += fmt::format("tuning {}: {} input rows, {} outputs, {}\n", r.model, r.rows, r.outputs, precision_name(r.precision));
    if (r.metric_slack)
        out += fmt::format("target: held-out {} at most {}% above the deployed solver's (labels given); deviation = "
                           "|out - ref| / max(1, |ref|) over every row and output, shown beside it\n",
                           metric_name(r.classification), format_double(100.0 * *r.metric_slack));
    else
        out += fmt::format("target: deviation <= {}, the deviation being |out - ref| / max(1, |ref|) over every row and output\n",
                           format_double(r.target));
    if (r.labelled)
        out += fmt::format("held-out {} against the labels: {}\n", metric_name(r.classification),
                           r.classification ? "mean of -log(probability of the labelled class)"
                                            : "root mean square of out - label over every row and output");
    out += "deviations are those of the reference evaluator in double";
    out += r.precision == Precision::float32 ? "; the emitted float code adds its rounding (meander verify measures it)\n" : "\n";
    if (r.precision == Precision::float32)
        out += fmt::format("cycles: meander cost's static estimate of one inference on the {} (the whole model, the candidate "
                           "in its block and the other blocks as deployed; --core for another)\n",
                           r.core);
    if (r.blocks.empty()) {
        out += "the model has no continuous block: there is no solver to tune\n";
        return out;
    }
    for (const TuneBlock& b : r.blocks) {
        out += fmt::format("\nblock {} (state {}, {} MACs per field evaluation)\n", b.name, b.state, b.field_macs);
        out += fmt::format("  reference: {} ({} field evaluations on the hardest row)\n", format_solver(b.reference),
                           b.reference_field_evals);
        if (b.trained) out += fmt::format("  trained with: {}\n", format_solver(*b.trained));
        if (std::any_of(b.candidates.begin(), b.candidates.end(), [](const TuneCandidate& k) { return k.adaptive; }))
            out += fmt::format("  rtol by decades from 0.1, atol = rtol / 100, none below {:.3g} (the square root of the {} epsilon)\n",
                               r.rtol_floor, precision_name(r.precision));
        out += "\n";
        std::vector<std::vector<std::string>> rows;
        std::vector<std::string> head{"solver", "deviation", "evals (worst)", "evals (measured)", "MACs (worst)", "meets", ""};
        if (r.labelled) head.insert(head.begin() + 2, metric_name(r.classification));
        if (b.deployed.worst_cycles) head.insert(head.end() - 2, "cycles (worst)");
        rows.push_back(head);
        for (std::size_t i = 0; i < b.candidates.size(); ++i)
            rows.push_back(candidate_row(b.candidates[i], b.chosen && *b.chosen == i, r.labelled));
        rows.push_back({});
        std::vector<std::string> dep = candidate_row(b.deployed, false, r.labelled);
        dep[0] += "  (deployed)";
        rows.push_back(dep);
        out += table(rows, "  ");
        out += "\n";
        if (b.chosen) {
            const TuneCandidate& k = b.candidates[*b.chosen];
            out += fmt::format("  recommended: {}\n", b.solver_line);
            out += fmt::format("    deviation {}, {} field evaluations and {} MACs per inference at worst", deviation_text(k.deviation),
                               k.worst_field_evals, k.worst_macs);
            out += fmt::format(" (deployed: {} and {})\n", b.deployed.worst_field_evals, b.deployed.worst_macs);
            if (k.worst_cycles && b.deployed.worst_cycles)
                out += fmt::format("    the model's estimated cycles per inference on the {} at worst: {} (deployed: {})\n",
                                   r.core, cycles_text(*k.worst_cycles), cycles_text(*b.deployed.worst_cycles));
            if (k.metric && b.deployed.metric)
                out += fmt::format("    held-out {} {} (deployed {})\n", metric_name(r.classification),
                                   metric_cell(*k.metric), metric_cell(*b.deployed.metric));
            if (same_discretisation(k.spec, b.deployed.spec) && k.spec.max_steps == b.deployed.spec.max_steps)
                out += "    the deployed solver line is already this one\n";
            if (k.adaptive)
                out += "    max-steps is the most attempts these inputs needed plus 25%: inputs unlike them may need more\n";
        } else if (b.closest && r.metric_slack) {
            const TuneCandidate& k = b.candidates[*b.closest];
            out += fmt::format("  no candidate keeps the held-out {} within {}% of the deployed solver's: the smallest is {}, "
                               "with solver {}\n", metric_name(r.classification), format_double(100.0 * *r.metric_slack),
                               k.metric ? metric_cell(*k.metric) : "-", format_solver(k.spec));
        } else if (b.closest) {
            const TuneCandidate& k = b.candidates[*b.closest];
            out += fmt::format("  no candidate meets the target {}: the smallest deviation is {}, with solver {}\n",
                               format_double(r.target), deviation_text(k.deviation), format_solver(k.spec));
        } else {
            out += fmt::format("  no candidate meets the target {}: every one fails on some row\n", format_double(r.target));
        }
        for (const SweepStop& st : b.stopped)
            out += fmt::format("  note: the {} sweep stopped at {} steps: {} steps already meet the target and more steps "
                               "cost more (--whole-sweep tries every count up to the sweep's end)\n",
                               st.method, st.last_tried, st.first_meeting);
        for (const std::string& w : b.warnings) out += "  warning: " + w + "\n";
    }
    return out;
}

std::string render_tune_json(const TuneReport& r) {
    nlohmann::json j;
    j["model"] = r.model;
    j["target"] = r.target;
    if (r.labelled) j["metric"] = metric_name(r.classification);
    if (r.metric_slack) j["metric_slack"] = *r.metric_slack;
    j["precision"] = precision_name(r.precision);
    j["core"] = r.core;
    j["rtol_floor"] = r.rtol_floor;
    j["rows"] = r.rows;
    j["outputs"] = r.outputs;
    j["blocks"] = nlohmann::json::array();
    for (const TuneBlock& b : r.blocks) {
        nlohmann::json jb;
        jb["block"] = b.name;
        jb["state"] = b.state;
        jb["field_macs"] = b.field_macs;
        jb["reference"] = {{"solver", format_solver(b.reference)}, {"max_field_evals", b.reference_field_evals}};
        jb["trained"] = b.trained ? nlohmann::json(format_solver(*b.trained)) : nlohmann::json(nullptr);
        jb["deployed"] = candidate_json(b.deployed);
        jb["candidates"] = nlohmann::json::array();
        for (const TuneCandidate& k : b.candidates) jb["candidates"].push_back(candidate_json(k));
        jb["chosen"] = b.chosen ? nlohmann::json(*b.chosen) : nlohmann::json(nullptr);
        jb["solver_line"] = b.chosen ? nlohmann::json(b.solver_line) : nlohmann::json(nullptr);
        jb["warnings"] = b.warnings;
        jb["sweeps_stopped"] = nlohmann::json::array();
        for (const SweepStop& st : b.stopped)
            jb["sweeps_stopped"].push_back({{"method", st.method}, {"first_meeting_steps", st.first_meeting},
                                            {"last_steps_tried", st.last_tried}});
        j["blocks"].push_back(jb);
    }
    return j.dump(2) + "\n";
}

}  // namespace meander
