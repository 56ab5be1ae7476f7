#include "stream.hpp"

#include <cmath>

#include "activation.hpp"
#include "integrate.hpp"
#include "standardise.hpp"
#include "tableau.hpp"

namespace meander {

long gap_steps(const SolverSpec& spec, double gap) {
    if (!(gap > 0)) return 0;
    const double n = std::ceil(gap * spec.steps_per_unit);
    return n < 1 ? 1 : static_cast<long>(n);
}

SolverSpec solver_for_gap(const SolverSpec& spec, double gap) {
    SolverSpec s = spec;
    const Tableau* t = find_tableau(spec.method);
    if (t && !t->adaptive()) s.steps = static_cast<int>(gap_steps(spec, gap));
    return s;
}

long worst_evolve_field_evals(const Stream& stream) {
    if (stream.evolve.blend) return 0;
    return worst_field_evals(solver_for_gap(stream.evolve.solver, stream.largest_gap));
}

long double worst_observation_macs(const Model& model) {
    long double macs = 0;
    // The readout: its layers once, a continuous block's field as often as its solver allows.
    for (const Block& b : model.blocks) {
        if (b.kind == Block::Kind::continuous)
            macs += static_cast<long double>(field_macs(b.continuous)) *
                    static_cast<long double>(worst_field_evals(b.continuous.solver));
        else
            for_each_dense(std::vector<Block>{b}, [&](const Dense& d) { macs += dense_macs(d); });
    }
    if (!model.stream) return macs;
    const Stream& st = *model.stream;
    for_each_dense(st.update_layers, [&](const Dense& d) { macs += dense_macs(d); });
    const long field = field_macs(st.evolve);
    if (st.evolve.blend)
        macs += field;
    else
        macs += static_cast<long double>(field) * static_cast<long double>(worst_evolve_field_evals(st));
    return macs;
}

void gated_update(const Dense& ih, const Dense& hh, const Eigen::VectorXd& x, Eigen::VectorXd& h) {
    Eigen::VectorXd gi, gh;
    apply_dense(ih, 0.0, x, gi);
    apply_dense(hh, 0.0, h, gh);
    const Eigen::Index n = h.size();
    for (Eigen::Index i = 0; i < n; ++i) {
        const double r = activate(Activation::sigmoid, gi[i] + gh[i], 0.0);
        const double z = activate(Activation::sigmoid, gi[n + i] + gh[n + i], 0.0);
        const double c = std::tanh(gi[2 * n + i] + r * gh[2 * n + i]);
        h[i] = (1.0 - z) * c + z * h[i];
    }
}

void blend_evolve(const Continuous& blend, double gap, Eigen::VectorXd& h) {
    const std::size_t heads = blend.field.size() - 3;
    const std::vector<Block> backbone(blend.field.begin(), blend.field.begin() + static_cast<std::ptrdiff_t>(heads));
    Eigen::VectorXd b, f, g, k;
    apply_sequence(backbone, 0.0, h, b);
    apply_dense(blend.field[heads].dense, 0.0, b, f);
    apply_dense(blend.field[heads + 1].dense, 0.0, b, g);
    apply_dense(blend.field[heads + 2].dense, 0.0, b, k);
    for (Eigen::Index i = 0; i < h.size(); ++i) {
        const double s = activate(Activation::sigmoid, -f[i] * gap, 0.0);
        h[i] = s * g[i] + (1.0 - s) * k[i];
    }
}

EvalResult observe(const Model& model, Eigen::VectorXd& state, const Eigen::VectorXd& obs, double gap) {
    EvalResult r;
    const Stream& st = *model.stream;
    if (!std::isfinite(gap) || gap < 0 || gap > st.largest_gap) {
        r.status = EvalStatus::gap_out_of_range;
        return r;
    }
    if (!obs.allFinite()) {
        r.status = EvalStatus::input_not_finite;
        return r;
    }
    // A standardised observation is checked like a layer's result (a huge value over a
    // tiny scale can overflow), before the evolution, as evaluate does before the first layer.
    Eigen::VectorXd x = obs;
    standardise_input(model, x);
    if (!x.allFinite()) {
        r.status = EvalStatus::state_not_finite;
        r.block = model.input_name;
        return r;
    }
    Eigen::VectorXd h = state;
    const Continuous& c = st.evolve;
    if (c.blend) {
        blend_evolve(c, gap, h);
    } else if (gap > 0) {
        const Field field = [&c](double t, const Eigen::VectorXd& y, Eigen::VectorXd& dy) { eval_field(c, t, y, dy); };
        const IntegrateStatus s = integrate(field, 0.0, gap, h, solver_for_gap(c.solver, gap), r.stats);
        if (s != IntegrateStatus::ok) {
            r.status = eval_status_of(s);
            r.block = c.name;
            return r;
        }
    }
    if (!h.allFinite()) {
        r.status = EvalStatus::state_not_finite;
        r.block = c.name;
        return r;
    }
    if (st.update == Stream::Update::gated) {
        gated_update(st.update_layers[0].dense, st.update_layers[1].dense, x, h);
    } else {
        Eigen::VectorXd hx(h.size() + x.size()), next;
        hx << h, x;
        apply_dense(st.update_layers[0].dense, 0.0, hx, next);
        h.swap(next);
    }
    if (!h.allFinite()) {
        r.status = EvalStatus::state_not_finite;
        r.block = st.update_name;
        return r;
    }
    EvalResult out = evaluate_blocks(model.blocks, h);
    add_stats(out.stats, r.stats);
    if (out.status != EvalStatus::ok) return out;
    unstandardise_output(model, out.output);
    if (!out.output.allFinite()) {
        out.status = EvalStatus::state_not_finite;
        out.block = model.output_name;
        return out;
    }
    state = h;
    return out;
}

}  // namespace meander
