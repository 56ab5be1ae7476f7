#include "evaluate.hpp"

#include "activation.hpp"
#include "standardise.hpp"

#include <cmath>

namespace meander {

// The operation order is the contract with the emitted code (DEVELOPERS.md,
// "Operation order"): per output, a sum from zero over the inputs in ascending
// order, the time column last, then the bias. A plain loop, not Eigen's
// product, whose blocking sums in another order.
void dense_affine(const Dense& d, double t, const Eigen::VectorXd& x, Eigen::VectorXd& z) {
    z.resize(d.out);
    for (int j = 0; j < d.out; ++j) {
        double acc = 0.0;
        for (int i = 0; i < d.in; ++i) acc += d.weight(j, i) * x[i];
        if (d.time_input) acc += d.weight(j, d.in) * t;  // time is the last input column
        if (d.has_bias) acc += d.bias[j];
        z[j] = acc;
    }
}

void dense_activate(const Dense& d, Eigen::VectorXd& y) {
    if (d.act == Activation::softmax) {
        // Max-subtracted: exp never overflows and the largest term is 1. The
        // C library's exp, the sum in ascending order, then a division (not
        // Eigen's vectorised exp and blocked sum): the emitted code does the same.
        double top = y[0];
        for (Eigen::Index i = 1; i < y.size(); ++i)
            if (y[i] > top) top = y[i];
        double sum = 0.0;
        for (Eigen::Index i = 0; i < y.size(); ++i) {
            y[i] = std::exp(y[i] - top);
            sum += y[i];
        }
        for (Eigen::Index i = 0; i < y.size(); ++i) y[i] = y[i] / sum;
        return;
    }
    for (Eigen::Index i = 0; i < y.size(); ++i) y[i] = activate(d.act, y[i], d.act_param);
}

void apply_dense(const Dense& d, double t, const Eigen::VectorXd& x, Eigen::VectorXd& y) {
    dense_affine(d, t, x, y);
    dense_activate(d, y);
}

namespace {

void apply_residual(const Residual& r, double t, const Eigen::VectorXd& x, Eigen::VectorXd& y) {
    Eigen::VectorXd g;
    apply_sequence(r.body, t, x, g);
    y = x + g;
}

}  // namespace

void apply_sequence(const std::vector<Block>& blocks, double t, const Eigen::VectorXd& x, Eigen::VectorXd& y) {
    Eigen::VectorXd cur = x;
    Eigen::VectorXd next;
    for (const Block& b : blocks) {
        if (b.kind == Block::Kind::dense)
            apply_dense(b.dense, t, cur, next);
        else if (b.kind == Block::Kind::residual)
            apply_residual(b.residual, t, cur, next);
        else
            next = cur;  // a continuous block cannot sit inside a field or a residual body
        cur.swap(next);
    }
    y = cur;
}

EvalStatus eval_status_of(IntegrateStatus s) {
    switch (s) {
    case IntegrateStatus::ok: return EvalStatus::ok;
    case IntegrateStatus::state_not_finite: return EvalStatus::state_not_finite;
    case IntegrateStatus::step_limit: return EvalStatus::step_limit;
    case IntegrateStatus::step_too_small: return EvalStatus::step_too_small;
    }
    return EvalStatus::state_not_finite;
}

void add_stats(IntegrateStats& total, const IntegrateStats& s) {
    if (s.steps_accepted > 0) {
        if (total.steps_accepted == 0 || s.h_min < total.h_min) total.h_min = s.h_min;
        if (total.steps_accepted == 0 || s.h_max > total.h_max) total.h_max = s.h_max;
    }
    total.field_evals += s.field_evals;
    total.steps_accepted += s.steps_accepted;
    total.steps_rejected += s.steps_rejected;
}

namespace {

long sequence_macs(const std::vector<Block>& blocks) {
    long macs = 0;
    for (const Block& b : blocks) {
        if (b.kind == Block::Kind::dense) macs += dense_macs(b.dense);
        if (b.kind == Block::Kind::residual) macs += sequence_macs(b.residual.body);
    }
    return macs;
}

}  // namespace

std::string_view eval_status_name(EvalStatus s) {
    switch (s) {
    case EvalStatus::ok: return "ok";
    case EvalStatus::input_not_finite: return "input_not_finite";
    case EvalStatus::state_not_finite: return "state_not_finite";
    case EvalStatus::step_limit: return "step_limit";
    case EvalStatus::step_too_small: return "step_too_small";
    case EvalStatus::gap_out_of_range: return "gap_out_of_range";
    }
    return "state_not_finite";
}

void eval_field(const Continuous& block, double t, const Eigen::VectorXd& y, Eigen::VectorXd& dy) {
    apply_sequence(block.field, t, y, dy);
}

EvalResult evaluate(const Model& model, const Eigen::VectorXd& input) {
    if (!input.allFinite()) {
        EvalResult r;
        r.status = EvalStatus::input_not_finite;
        return r;
    }
    if (!model.input_info.standardised && !model.output_info.standardised) return evaluate_blocks(model.blocks, input);
    // Standardised values are checked like a layer's result: a huge input over a
    // tiny scale can overflow.
    Eigen::VectorXd x = input;
    standardise_input(model, x);
    if (!x.allFinite()) {
        EvalResult r;
        r.status = EvalStatus::state_not_finite;
        r.block = model.input_name;
        return r;
    }
    EvalResult r = evaluate_blocks(model.blocks, x);
    if (r.status != EvalStatus::ok) return r;
    unstandardise_output(model, r.output);
    if (!r.output.allFinite()) {
        r.status = EvalStatus::state_not_finite;
        r.block = model.output_name;
    }
    return r;
}

EvalResult evaluate_blocks(const std::vector<Block>& blocks, const Eigen::VectorXd& input) {
    EvalResult r;
    Eigen::VectorXd x = input;
    Eigen::VectorXd y;
    for (const Block& b : blocks) {
        std::string_view name;
        if (b.kind == Block::Kind::dense) {
            name = b.dense.name;
            apply_dense(b.dense, 0.0, x, y);
        } else if (b.kind == Block::Kind::residual) {
            name = b.residual.name;
            apply_residual(b.residual, 0.0, x, y);
        } else {
            const Continuous& c = b.continuous;
            name = c.name;
            y = Eigen::VectorXd::Zero(c.state());
            y.head(c.width) = x;  // augmented dimensions start at zero
            const Field field = [&c](double t, const Eigen::VectorXd& state, Eigen::VectorXd& dstate) {
                eval_field(c, t, state, dstate);
            };
            IntegrateStats stats;
            const IntegrateStatus s = integrate(field, c.t0, c.t1, y, c.solver, stats);
            add_stats(r.stats, stats);
            if (s != IntegrateStatus::ok) {
                r.status = eval_status_of(s);
                r.block = std::string(name);
                return r;
            }
        }
        if (!y.allFinite()) {
            r.status = EvalStatus::state_not_finite;
            r.block = std::string(name);
            return r;
        }
        x.swap(y);
    }
    r.output = x;
    return r;
}

long dense_macs(const Dense& d) { return static_cast<long>(d.out) * d.in_total(); }

long field_macs(const Continuous& block) { return sequence_macs(block.field); }

}  // namespace meander
