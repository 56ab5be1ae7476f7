#include "gradient.hpp"

#include "adjoint.hpp"
#include "parameters.hpp"
#include "standardise.hpp"

namespace meander {

ForwardRecord forward_record(const Model& model, const Eigen::VectorXd& input, GradientWay way) {
    ForwardRecord r;
    if (!input.allFinite()) {
        r.status = EvalStatus::input_not_finite;
        return r;
    }
    r.blocks.resize(model.blocks.size());
    Eigen::VectorXd standardised = input;
    standardise_input(model, standardised);
    if (!standardised.allFinite()) {
        r.status = EvalStatus::state_not_finite;
        r.block = model.input_name;
        return r;
    }
    const Eigen::VectorXd* x = &standardised;
    for (std::size_t i = 0; i < model.blocks.size(); ++i) {
        const Block& b = model.blocks[i];
        BlockRecord& rec = r.blocks[i];
        if (b.kind == Block::Kind::continuous) {
            const Continuous& c = b.continuous;
            rec.x = Eigen::VectorXd::Zero(c.state());
            rec.x.head(c.width) = *x;  // augmented dimensions start at zero
            rec.y = rec.x;
            IntegrateStats stats;
            // The adjoint way keeps no steps: its memory does not grow with them.
            const IntegrateStatus s =
                integrate_recording(c, rec.y, way == GradientWay::discrete ? &rec.steps : nullptr, stats);
            r.stats.field_evals += stats.field_evals;
            r.stats.steps_accepted += stats.steps_accepted;
            r.stats.steps_rejected += stats.steps_rejected;
            if (s != IntegrateStatus::ok) {
                r.status = eval_status_of(s);
                r.block = c.name;
                return r;
            }
        } else {
            layer_forward(b, 0.0, *x, rec.tape);
            rec.x = rec.tape.x;
            rec.y = rec.tape.y;
        }
        if (!rec.y.allFinite()) {
            r.status = EvalStatus::state_not_finite;
            r.block = block_name(b);
            return r;
        }
        x = &rec.y;
    }
    r.output = *x;
    unstandardise_output(model, r.output);
    if (!r.output.allFinite()) {
        r.status = EvalStatus::state_not_finite;
        r.block = model.output_name;
    }
    return r;
}

Gradient backward(const Model& model, const ForwardRecord& record, const Eigen::VectorXd& output_bar, GradientWay way) {
    Gradient g;
    g.params = Eigen::VectorXd::Zero(param_count(model));
    std::vector<Eigen::Index> offset(model.blocks.size() + 1, 0);
    for (std::size_t i = 0; i < model.blocks.size(); ++i)
        offset[i + 1] = offset[i] + block_param_count(model.blocks[i]);
    // Through y * scale + mean and (x - mean) / scale: constants, so only the chain rule.
    Eigen::VectorXd bar = output_bar;
    if (const auto& s = model.output_info.standardised) bar = bar.cwiseProduct(s->scale);
    Eigen::VectorXd prev;
    for (std::size_t i = model.blocks.size(); i-- > 0;) {
        const Block& b = model.blocks[i];
        const BlockRecord& rec = record.blocks[i];
        auto grad = g.params.segment(offset[i], offset[i + 1] - offset[i]);
        if (b.kind != Block::Kind::continuous) {
            layer_backward(b, 0.0, rec.tape, bar, prev, grad);
        } else if (way == GradientWay::discrete) {
            backprop_steps(b.continuous, rec.x, rec.steps, bar, prev, grad);
        } else {
            const IntegrateStatus s =
                adjoint_pass(b.continuous, rec.y, bar, prev, grad, g.backward_stats, adjoint_solver(b.continuous.solver));
            if (s != IntegrateStatus::ok) {
                g.status = eval_status_of(s);
                g.block = b.continuous.name;
                return g;
            }
        }
        if (b.kind == Block::Kind::continuous) prev.conservativeResize(b.continuous.width);  // augmented inputs are constants
        bar.swap(prev);
    }
    if (const auto& s = model.input_info.standardised) bar = bar.cwiseQuotient(s->scale);
    g.input = bar;
    return g;
}

}  // namespace meander
