#include "adjoint.hpp"

#include "parameters.hpp"
#include "vjp.hpp"

namespace meander {

SolverSpec adjoint_solver(const SolverSpec& forward) {
    SolverSpec s = forward;
    s.max_steps = forward.max_steps * 10;
    return s;
}

IntegrateStatus adjoint_pass(const Continuous& c, const Eigen::VectorXd& y1, const Eigen::VectorXd& y1bar,
                             Eigen::VectorXd& y0bar, Eigen::Ref<Eigen::VectorXd> grad, IntegrateStats& stats,
                             const SolverSpec& solver) {
    const Eigen::Index n = c.state();
    const Eigen::Index p = sequence_param_count(c.field);
    // z = [y, a, g]
    const Field augmented = [&c, n, p](double t, const Eigen::VectorXd& z, Eigen::VectorXd& dz) {
        dz.resize(z.size());
        Eigen::VectorXd dy;
        Eigen::VectorXd ybar;
        Eigen::VectorXd g = Eigen::VectorXd::Zero(p);
        field_vjp(c, t, z.head(n), z.segment(n, n), ybar, g, &dy);
        dz.head(n) = dy;
        dz.segment(n, n) = -ybar;
        dz.tail(p) = -g;
    };
    Eigen::VectorXd z(2 * n + p);
    z << y1, y1bar, Eigen::VectorXd::Zero(p);
    const IntegrateStatus st = integrate(augmented, c.t1, c.t0, z, solver, stats);
    if (st != IntegrateStatus::ok) return st;
    y0bar = z.segment(n, n);
    grad += z.tail(p);
    return st;
}

}  // namespace meander
