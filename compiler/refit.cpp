#include "refit.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <random>
#include <thread>

#include "../runtime/evaluate.hpp"
#include "../runtime/parameters.hpp"
#include "../runtime/tableau.hpp"
#include "format.hpp"
#include "parallel.hpp"

namespace meander {

namespace {

constexpr const char* kWhere = "refit";

// The reference the refit aims at: tune's (compiler/tune.cpp).
SolverSpec tight_reference() {
    SolverSpec s;
    s.method = "dormand-prince";
    s.rtol = 1e-12;
    s.atol = 1e-12;
    s.max_steps = 1000000;
    s.written = {"rtol", "atol", "max-steps"};
    return s;
}

Model with_every_solver(const Model& model, const SolverSpec& spec) {
    Model m = model;
    for (Block& b : m.blocks)
        if (b.kind == Block::Kind::continuous) b.continuous.solver = spec;
    return m;
}

long model_worst_evals(const Model& m) {
    long n = 0;
    for (const Block& b : m.blocks)
        if (b.kind == Block::Kind::continuous) n += worst_field_evals(b.continuous.solver);
    return n;
}

struct RowLoss {
    double value = 0.0;
    Eigen::VectorXd out_bar;        // dL/doutput
};

// Regression: mean over outputs of ((o - t) / s)^2, s the target's spread;
// classification: cross-entropy of the output probabilities against t.
RowLoss row_loss(const Eigen::VectorXd& out, const Eigen::VectorXd& target, const Eigen::VectorXd& scale,
                 bool classification) {
    RowLoss l;
    const Eigen::Index k = out.size();
    l.out_bar = Eigen::VectorXd::Zero(k);
    for (Eigen::Index i = 0; i < k; ++i) {
        if (classification) {
            if (target[i] <= 0) continue;
            const double p = std::max(out[i], 1e-300);
            l.value -= target[i] * std::log(p);
            l.out_bar[i] = -target[i] / p;
        } else {
            const double d = (out[i] - target[i]) / scale[i];
            l.value += d * d / static_cast<double>(k);
            l.out_bar[i] = 2.0 * d / scale[i] / static_cast<double>(k);
        }
    }
    return l;
}

struct Problem {
    const std::vector<Eigen::VectorXd>* rows;
    const std::vector<Eigen::VectorXd>* targets;
    Eigen::VectorXd scale;
    bool classification = false;
    GradientWay way = GradientWay::discrete;
    int threads = 1;
};

// Mean loss over `idx` (forward only); NaN when a row fails.
double mean_loss(const Model& m, const Problem& p, const std::vector<std::size_t>& idx) {
    std::vector<double> loss(idx.size());
    parallel_for(idx.size(), p.threads, [&](std::size_t i) {
        const EvalResult r = evaluate(m, (*p.rows)[idx[i]]);
        loss[i] = r.status == EvalStatus::ok
                      ? row_loss(r.output, (*p.targets)[idx[i]], p.scale, p.classification).value
                      : std::nan("");
    });
    double sum = 0.0;
    for (double v : loss) sum += v;  // row order
    return idx.empty() ? 0.0 : sum / static_cast<double>(idx.size());
}

// Mean loss and gradient over a batch; per-row gradients summed in row order.
double batch_gradient(const Model& m, const Problem& p, const std::vector<std::size_t>& batch, Eigen::VectorXd& grad) {
    std::vector<double> loss(batch.size());
    std::vector<Eigen::VectorXd> g(batch.size());
    parallel_for(batch.size(), p.threads, [&](std::size_t i) {
        const ForwardRecord rec = forward_record(m, (*p.rows)[batch[i]], p.way);
        if (rec.status != EvalStatus::ok) {
            loss[i] = std::nan("");
            return;
        }
        const RowLoss l = row_loss(rec.output, (*p.targets)[batch[i]], p.scale, p.classification);
        const Gradient gr = backward(m, rec, l.out_bar, p.way);
        loss[i] = gr.status == EvalStatus::ok ? l.value : std::nan("");
        g[i] = gr.params;
    });
    grad.setZero();
    double sum = 0.0;
    for (std::size_t i = 0; i < batch.size(); ++i) {
        sum += loss[i];
        if (g[i].size() == grad.size()) grad += g[i];
    }
    const double n = static_cast<double>(batch.size());
    grad /= n;
    return sum / n;
}

// Adam (Kingma & Ba, ICLR 2015), the paper's defaults but the step size,
// which ramps up linearly over the first `warmup` steps: the model starts
// close to its target, and Adam's first steps (each weight moved by about the
// full rate) would otherwise throw it further off than the fit can win back.
struct Adam {
    long warmup = 100;
    Eigen::VectorXd m, v;
    double rate, b1 = 0.9, b2 = 0.999, eps = 1e-8;
    long t = 0;
    void step(Eigen::VectorXd& theta, const Eigen::VectorXd& g) {
        if (m.size() == 0) {
            m = Eigen::VectorXd::Zero(theta.size());
            v = Eigen::VectorXd::Zero(theta.size());
        }
        ++t;
        m = b1 * m + (1 - b1) * g;
        v = b2 * v + (1 - b2) * g.cwiseAbs2();
        const double c1 = 1 - std::pow(b1, static_cast<double>(t));
        const double c2 = 1 - std::pow(b2, static_cast<double>(t));
        const double r = rate * std::min(1.0, static_cast<double>(t) / static_cast<double>(warmup));
        theta.array() -= r * (m.array() / c1) / ((v.array() / c2).sqrt() + eps);
    }
};

Eigen::VectorXd round_to_float(const Eigen::VectorXd& v) {
    return v.unaryExpr([](double x) { return static_cast<double>(static_cast<float>(x)); });
}

}  // namespace

std::optional<Model> with_solver(const Model& model, const std::vector<std::string>& blocks, const SolverSpec& solver,
                                 Diagnostics& diags) {
    Model m = model;
    for (const std::string& name : blocks) {
        const auto it = std::find_if(m.blocks.begin(), m.blocks.end(), [&](const Block& b) { return block_name(b) == name; });
        if (it == m.blocks.end() || it->kind != Block::Kind::continuous) {
            diags.error(kWhere, fmt::format("the model has no continuous block named '{}'", name));
            return std::nullopt;
        }
    }
    bool any = false;
    for (Block& b : m.blocks) {
        if (b.kind != Block::Kind::continuous) continue;
        if (!blocks.empty() && std::find(blocks.begin(), blocks.end(), b.continuous.name) == blocks.end()) continue;
        b.continuous.solver = solver;
        b.continuous.solver.loc = model.loc;
        b.continuous.trained = b.continuous.solver;
        any = true;
    }
    if (!any) {
        diags.error(kWhere, "the model has no continuous block: there is no solver to refit for");
        return std::nullopt;
    }
    return m;
}

RefitFigures model_figures(const Model& model, const std::vector<Eigen::VectorXd>& rows,
                           const std::vector<Eigen::VectorXd>& refs, const std::optional<Labels>& labels,
                           bool classification) {
    RefitFigures f;
    f.worst_field_evals = model_worst_evals(model);
    std::vector<Eigen::VectorXd> outs(rows.size());
    std::vector<EvalResult> res(rows.size());
    parallel_for(rows.size(), hardware_threads(),
                 [&](std::size_t i) { res[i] = evaluate(model, rows[i]); });
    for (std::size_t r = 0; r < rows.size(); ++r) {
        if (res[r].status != EvalStatus::ok) {
            f.ok = false;
            f.failure = fmt::format("{} in block {} on row {}", eval_status_name(res[r].status), res[r].block, r + 1);
            return f;
        }
        outs[r] = res[r].output;
        for (Eigen::Index i = 0; i < refs[r].size(); ++i) {
            const double d = std::fabs(outs[r][i] - refs[r][i]) / std::max(1.0, std::fabs(refs[r][i]));
            if (!(d <= f.deviation)) f.deviation = d;
        }
    }
    if (labels) f.metric = task_metric(classification, outs, *labels);
    return f;
}

std::optional<RefitReport> refit_model(const Model& model, const RefitOptions& opts, Diagnostics& diags) {
    if (opts.inputs.size() < 2) {
        diags.error(kWhere, "refitting needs at least 2 input rows (some train, some are held out)");
        return std::nullopt;
    }
    if (opts.fit_labels && !opts.labels) {
        diags.error(kWhere, "fitting labels needs --labels");
        return std::nullopt;
    }
    auto cheap = with_solver(model, opts.blocks, opts.solver, diags);
    if (!cheap) return std::nullopt;

    RefitReport rep;
    std::vector<Eigen::VectorXd> rows;
    for (const auto& r : opts.inputs) rows.push_back(Eigen::Map<const Eigen::VectorXd>(r.data(), static_cast<Eigen::Index>(r.size())));
    const Model reference = with_every_solver(model, tight_reference());
    std::vector<Eigen::VectorXd> refs(rows.size());
    std::vector<EvalStatus> ref_status(rows.size());
    parallel_for(rows.size(), hardware_threads(), [&](std::size_t i) {
        const EvalResult r = evaluate(reference, rows[i]);
        ref_status[i] = r.status;
        refs[i] = r.output;
    });
    for (std::size_t i = 0; i < rows.size(); ++i)
        if (ref_status[i] != EvalStatus::ok) {
            diags.error(kWhere, fmt::format("input row {}: the reference (solver {}) ends with {}", i + 1,
                                            format_solver(tight_reference()), eval_status_name(ref_status[i])));
            return std::nullopt;
        }
    // The rows of the figures and their references.
    rep.separate_check = !opts.check_inputs.empty();
    std::vector<Eigen::VectorXd> check_rows = rows, check_refs = refs;
    const std::optional<Labels>& check_labels = rep.separate_check ? opts.check_labels : opts.labels;
    if (rep.separate_check) {
        check_rows.clear();
        for (const auto& r : opts.check_inputs)
            check_rows.push_back(Eigen::Map<const Eigen::VectorXd>(r.data(), static_cast<Eigen::Index>(r.size())));
        check_refs.assign(check_rows.size(), Eigen::VectorXd());
        std::vector<EvalStatus> st(check_rows.size());
        parallel_for(check_rows.size(), hardware_threads(),
                     [&](std::size_t i) {
                         const EvalResult r = evaluate(reference, check_rows[i]);
                         st[i] = r.status;
                         check_refs[i] = r.output;
                     });
        for (std::size_t i = 0; i < st.size(); ++i)
            if (st[i] != EvalStatus::ok) {
                diags.error(kWhere, fmt::format("check row {}: the reference ends with {}", i + 1, eval_status_name(st[i])));
                return std::nullopt;
            }
    }
    rep.check_rows = static_cast<int>(check_rows.size());
    rep.deployed = model_figures(model, check_rows, check_refs, check_labels, opts.classification);
    rep.before = model_figures(*cheap, check_rows, check_refs, check_labels, opts.classification);

    // Targets and their spread.
    const std::vector<Eigen::VectorXd>& targets = opts.fit_labels ? opts.labels->rows : refs;
    Problem p;
    p.rows = &rows;
    p.targets = &targets;
    p.classification = opts.classification;
    p.way = opts.way;
    p.threads = opts.threads > 0 ? opts.threads : hardware_threads();

    // Split: a seeded Fisher-Yates shuffle (the same on every platform), the last part held out.
    std::mt19937_64 rng(opts.seed);
    std::vector<std::size_t> order(rows.size());
    for (std::size_t i = 0; i < order.size(); ++i) order[i] = i;
    const auto shuffle = [&rng](std::vector<std::size_t>& v) {
        for (std::size_t i = v.size(); i > 1; --i) std::swap(v[i - 1], v[static_cast<std::size_t>(rng() % i)]);
    };
    shuffle(order);
    const std::size_t n_hold = std::clamp<std::size_t>(static_cast<std::size_t>(std::ceil(opts.holdout * static_cast<double>(rows.size()))),
                                                       1, rows.size() - 1);
    std::vector<std::size_t> train(order.begin(), order.end() - static_cast<std::ptrdiff_t>(n_hold));
    const std::vector<std::size_t> hold(order.end() - static_cast<std::ptrdiff_t>(n_hold), order.end());
    rep.train_rows = static_cast<int>(train.size());
    rep.holdout_rows = static_cast<int>(hold.size());

    const Eigen::Index k = model.output_size;
    p.scale = Eigen::VectorXd::Ones(k);
    if (!opts.classification) {
        Eigen::VectorXd mean = Eigen::VectorXd::Zero(k), sq = Eigen::VectorXd::Zero(k);
        for (std::size_t i : train) mean += targets[i];
        mean /= static_cast<double>(train.size());
        for (std::size_t i : train) sq += (targets[i] - mean).cwiseAbs2();
        p.scale = (sq / static_cast<double>(train.size())).cwiseSqrt().cwiseMax(1e-9);
    }

    Model m = *cheap;
    Eigen::VectorXd theta = get_params(m);
    Eigen::VectorXd best = theta;
    const double start_train = mean_loss(m, p, train);
    rep.start_holdout_loss = mean_loss(m, p, hold);
    double best_hold = std::isfinite(rep.start_holdout_loss) ? rep.start_holdout_loss : HUGE_VAL;
    rep.best_holdout_loss = best_hold;
    Adam adam;
    adam.rate = opts.rate;
    Eigen::VectorXd grad(theta.size());
    int above = 0, since_best = 0;
    const auto t_start = std::chrono::steady_clock::now();
    const std::size_t batch = static_cast<std::size_t>(std::max(1, opts.batch));
    for (int epoch = 1; epoch <= opts.epochs; ++epoch) {
        shuffle(train);
        double sum = 0.0;
        for (std::size_t b0 = 0; b0 < train.size(); b0 += batch) {
            if (opts.stop && opts.stop->load()) {
                rep.end = RefitReport::End::interrupted;
                rep.epochs_run = epoch - 1;
                return rep;
            }
            const std::vector<std::size_t> idx(train.begin() + static_cast<std::ptrdiff_t>(b0),
                                               train.begin() + static_cast<std::ptrdiff_t>(std::min(train.size(), b0 + batch)));
            const double l = batch_gradient(m, p, idx, grad);
            sum += l * static_cast<double>(idx.size());
            if (!std::isfinite(l) || !grad.allFinite()) break;
            adam.step(theta, grad);
            set_params(m, theta);
        }
        const double train_loss = sum / static_cast<double>(train.size());
        const double hold_loss = mean_loss(m, p, hold);
        rep.epochs_run = epoch;
        if (opts.progress) {
            RefitProgress pr{epoch, opts.epochs, train_loss, hold_loss,
                             std::chrono::duration<double>(std::chrono::steady_clock::now() - t_start).count()};
            opts.progress(pr);
        }
        if (!std::isfinite(train_loss) || !std::isfinite(hold_loss)) {
            rep.end = RefitReport::End::diverged;
            rep.message = fmt::format("the loss became {} in epoch {} (a row failed under the new solver, or the steps "
                                      "blew up); try a smaller --rate",
                                      std::isfinite(train_loss) ? "non-finite on the held-out rows" : "NaN or infinite", epoch);
            return rep;
        }
        above = train_loss > 10.0 * start_train ? above + 1 : 0;
        if (above >= opts.diverge_epochs) {
            rep.end = RefitReport::End::diverged;
            rep.message = fmt::format("the training loss has stayed above ten times its start ({:.4g}) for {} epochs, "
                                      "{:.4g} in epoch {}; try a smaller --rate",
                                      start_train, opts.diverge_epochs, train_loss, epoch);
            return rep;
        }
        if (hold_loss < best_hold) {
            best_hold = hold_loss;
            best = theta;
            rep.best_epoch = epoch;
            since_best = 0;
        } else if (++since_best >= opts.patience) {
            rep.end = RefitReport::End::early_stop;
            break;
        }
    }
    rep.best_holdout_loss = best_hold;
    set_params(m, opts.float32_weights ? round_to_float(best) : best);
    rep.after = model_figures(m, check_rows, check_refs, check_labels, opts.classification);
    rep.model = std::move(m);
    return rep;
}

namespace {

// A line with its statement replaced, indentation and trailing comment kept.
std::string replace_statement(std::string_view line, const std::string& statement) {
    const std::size_t indent = line.find_first_not_of(" \t");
    const std::size_t hash = line.find('#');
    std::string out(line.substr(0, indent == std::string_view::npos ? 0 : indent));
    out += statement;
    if (hash != std::string_view::npos) out += "  " + std::string(line.substr(hash));
    return out;
}

}  // namespace

std::string refit_description(const Source& src, const Model& original, const Model& refitted,
                              const std::string& weights_file, const std::string& note) {
    std::vector<std::string> lines;
    for (int li = 1; li <= static_cast<int>(src.line_starts.size()); ++li) lines.emplace_back(src.line_text(li));
    if (!src.text.empty() && src.text.back() == '\n' && !lines.empty() && lines.back().empty()) lines.pop_back();
    std::vector<std::pair<int, std::string>> inserts;  // after line (1-based), text
    const auto at = [&](int line) -> std::string& { return lines[static_cast<std::size_t>(line - 1)]; };
    for (std::size_t i = 0; i < original.blocks.size(); ++i) {
        if (original.blocks[i].kind != Block::Kind::continuous) continue;
        const Continuous& before = original.blocks[i].continuous;
        const Continuous& after = refitted.blocks[i].continuous;
        if (after.solver.method == before.solver.method && format_solver(after.solver) == format_solver(before.solver) &&
            after.trained && before.trained && format_solver(*after.trained) == format_solver(*before.trained))
            continue;
        const int sl = before.solver.loc.line;
        at(sl) = replace_statement(at(sl), "solver " + format_solver(after.solver));
        const std::string trained = "trained-with " + format_solver(*after.trained);
        if (before.trained && before.trained->loc.line > 0) {
            at(before.trained->loc.line) = replace_statement(at(before.trained->loc.line), trained);
        } else {
            const std::string& sline = at(sl);
            inserts.emplace_back(sl, sline.substr(0, sline.find_first_not_of(" \t")) + trained);
        }
    }
    if (original.weights_loc.line > 0)
        at(original.weights_loc.line) = replace_statement(at(original.weights_loc.line), "weights \"" + weights_file + "\"");
    // The new weights file holds only what the model binds: an ignore statement would match nothing (and warn).
    if (!original.ignore_locs.empty()) {
        int first = original.ignore_locs.front().line;
        while (first > 1 && at(first).find("ignore") == std::string::npos) --first;
        for (int l = first; l <= original.ignore_locs.back().line; ++l) at(l) = "# " + at(l);
        inserts.emplace_back(first - 1, fmt::format("# {} holds only the tensors the model binds; no tensor is left to ignore:",
                                                    weights_file));
    }
    std::sort(inserts.begin(), inserts.end(), [](const auto& a, const auto& b) { return a.first > b.first; });
    for (const auto& [after, text] : inserts) lines.insert(lines.begin() + after, text);
    std::string out = "# " + note + "\n";
    for (const std::string& l : lines) out += l + "\n";
    return out;
}

TensorSet refit_tensors(const Model& refitted) {
    TensorSet set;
    for_each_dense(refitted.blocks, [&](const Dense& d) {
        Tensor w;
        w.name = d.weight_tensor;
        // Stored the way the description says the layer reads it (its layout options).
        w.shape = stored_weight_shape(d);
        w.values.assign(static_cast<std::size_t>(d.weight.size()), 0.0);
        for (Eigen::Index r = 0; r < d.weight.rows(); ++r)
            for (Eigen::Index c = 0; c < d.weight.cols(); ++c)
                w.values[stored_weight_index(d, static_cast<std::size_t>(r), static_cast<std::size_t>(c))] = d.weight(r, c);
        w.dtype = "float32";
        set.tensors.push_back(std::move(w));
        if (d.has_bias) {
            Tensor b;
            b.name = d.bias_tensor;
            b.shape = {static_cast<std::size_t>(d.out)};
            b.values.assign(d.bias.data(), d.bias.data() + d.bias.size());
            b.dtype = "float32";
            set.tensors.push_back(std::move(b));
        }
    });
    // The standardisation tensors the description names, as they were read (refit does not change them).
    auto vector = [&](const VectorInfo& info) {
        if (!info.standardised) return;
        const std::pair<const std::string*, const Eigen::VectorXd*> parts[] = {
            {&info.standardised->mean_tensor, &info.standardised->mean},
            {&info.standardised->scale_tensor, &info.standardised->scale}};
        for (const auto& [name, v] : parts) {
            if (name->empty()) continue;
            Tensor t;
            t.name = *name;
            t.shape = {static_cast<std::size_t>(v->size())};
            t.values.assign(v->data(), v->data() + v->size());
            t.dtype = "float32";
            set.tensors.push_back(std::move(t));
        }
    };
    vector(refitted.input_info);
    vector(refitted.output_info);
    return set;
}

std::string render_refit(const RefitReport& r, const Model& original, bool labelled, bool classification) {
    std::string out;
    const auto line = [&](const char* what, const RefitFigures& f) {
        std::string s = fmt::format("  {:<34} {:>6}  ", what, f.worst_field_evals);
        if (!f.ok) return s + "fails: " + f.failure + "\n";
        s += fmt::format("{:>10.3e}", f.deviation);
        if (labelled && f.metric) s += fmt::format("  {:>10.4g}", f.metric->score);
        if (labelled && f.metric && classification) s += fmt::format("  {:>6.2f}%", 100.0 * f.metric->accuracy);
        return s + "\n";
    };
    out += fmt::format("refit {}: {} rows train, {} held out; {} epochs, best held-out loss {:.4g} in epoch {} (from {:.4g})\n",
                       original.name, r.train_rows, r.holdout_rows, r.epochs_run, r.best_holdout_loss, r.best_epoch,
                       r.start_holdout_loss);
    out += fmt::format("figures over {} rows{}\n", r.check_rows,
                       r.separate_check ? " not trained on (--check-input)" : " (the training input; --check-input gives rows not trained on)");
    out += "deviation: largest |out - ref| / max(1, |ref|) over every row and output, ref: the original weights under "
           "dormand-prince, rtol 1e-12, atol 1e-12\n\n";
    std::string head = fmt::format("  {:<34} {:>6}  {:>10}", "", "evals", "deviation");
    if (labelled) head += fmt::format("  {:>10}", metric_name(classification));
    if (labelled && classification) head += fmt::format("  {:>7}", "accuracy");
    out += head + "\n";
    out += line("original weights, deployed solver", r.deployed);
    out += line("original weights, new solver", r.before);
    out += line("refitted weights, new solver", r.after);
    return out;
}

}  // namespace meander
