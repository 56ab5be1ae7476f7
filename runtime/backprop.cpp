#include "backprop.hpp"

#include "evaluate.hpp"
#include "tableau.hpp"
#include "vjp.hpp"

namespace meander {

namespace {

// y + h * sum_j w[offset + j] k[j], zero weights skipped: runtime/integrate.cpp's
// order of operations, so the replayed states are the integrator's.
Eigen::VectorXd combine(const Eigen::VectorXd& y, double h, const std::vector<Coefficient>& w, std::size_t offset,
                        std::size_t count, const std::vector<Eigen::VectorXd>& k) {
    Eigen::VectorXd sum = Eigen::VectorXd::Zero(y.size());
    for (std::size_t j = 0; j < count; ++j) {
        const double wj = w[offset + j].value;
        if (wj != 0.0) sum += wj * k[j];
    }
    return y + h * sum;
}

// Stages a step needs for y_new. An FSAL method's last stage is f(t_new,
// y_new), the next step's first; its weight in b is zero, so it is left out.
std::size_t used_stages(const Tableau& tb) {
    return tb.fsal ? static_cast<std::size_t>(tb.stages) - 1 : static_cast<std::size_t>(tb.stages);
}

}  // namespace

IntegrateStatus integrate_recording(const Continuous& c, Eigen::VectorXd& y, std::vector<StepPlan>* steps,
                                    IntegrateStats& stats) {
    const Field field = [&c](double t, const Eigen::VectorXd& s, Eigen::VectorXd& ds) { eval_field(c, t, s, ds); };
    if (steps == nullptr) return integrate(field, c.t0, c.t1, y, c.solver, stats);
    std::vector<StepRecord> trace;
    const IntegrateStatus st = integrate(field, c.t0, c.t1, y, c.solver, stats, &trace);
    steps->clear();
    const Tableau* tb = find_tableau(c.solver.method);
    const bool fixed = tb == nullptr || !tb->adaptive() || c.solver.steps > 0;
    std::vector<StepRecord> accepted;
    for (const StepRecord& r : trace)
        if (r.accepted) accepted.push_back(r);
    for (std::size_t i = 0; i < accepted.size(); ++i) {
        StepPlan p{accepted[i].t, accepted[i].h, 0.0};
        // Fixed step: the step ends at t_i + h (the next starts at t0 + (i+1) h);
        // adaptive: at the next step's start, the last one at t1.
        if (fixed)
            p.t_new = p.t + p.h;
        else
            p.t_new = i + 1 < accepted.size() ? accepted[i + 1].t : c.t1;
        steps->push_back(p);
    }
    return st;
}

void backprop_steps(const Continuous& c, const Eigen::VectorXd& y0, const std::vector<StepPlan>& steps,
                    const Eigen::VectorXd& y1bar, Eigen::VectorXd& y0bar, Eigen::Ref<Eigen::VectorXd> grad) {
    const Tableau& tb = *find_tableau(c.solver.method);
    const std::size_t s = used_stages(tb);
    const std::size_t n = steps.size();
    // Replay: every step's stage arguments (stage 0's is the step's y).
    std::vector<std::vector<Eigen::VectorXd>> args(n, std::vector<Eigen::VectorXd>(s));
    std::vector<Eigen::VectorXd> k(s);
    Eigen::VectorXd y = y0;
    for (std::size_t m = 0; m < n; ++m) {
        const StepPlan& p = steps[m];
        for (std::size_t i = 0; i < s; ++i) {
            args[m][i] = i == 0 ? y : combine(y, p.h, tb.a, i * (i - 1) / 2, i, k);
            eval_field(c, p.t + tb.c[i].value * p.h, args[m][i], k[i]);
        }
        y = combine(y, p.h, tb.b, 0, s, k);
    }
    // Reverse: y_new = y + h sum b_i k_i, k_i = f(t_i, Y_i), Y_i = y + h sum_j a_ij k_j.
    Eigen::VectorXd ybar = y1bar;
    std::vector<Eigen::VectorXd> kbar(s);
    Eigen::VectorXd argbar;
    for (std::size_t m = n; m-- > 0;) {
        const StepPlan& p = steps[m];
        for (std::size_t i = 0; i < s; ++i) kbar[i] = (p.h * tb.b[i].value) * ybar;
        Eigen::VectorXd ynext_bar = ybar;  // y_new depends on y directly
        for (std::size_t i = s; i-- > 0;) {
            if (tb.b[i].value == 0.0 && kbar[i].isZero(0.0)) continue;  // a stage nothing downstream uses
            field_vjp(c, p.t + tb.c[i].value * p.h, args[m][i], kbar[i], argbar, grad);
            ynext_bar += argbar;
            for (std::size_t j = 0; j < i; ++j) {
                const double aij = tb.a_at(static_cast<int>(i), static_cast<int>(j));
                if (aij != 0.0) kbar[j] += (p.h * aij) * argbar;
            }
        }
        ybar.swap(ynext_bar);
    }
    y0bar = ybar;
}

}  // namespace meander
