#include "integrate.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

namespace meander {

namespace {

// sqrt(mean of squares): the squares summed from zero in ascending order, then
// divided by n (DEVELOPERS.md, "Operation order"; not Eigen's blocked squaredNorm).
double rms(const Eigen::VectorXd& v) {
    if (v.size() == 0) return 0.0;
    double sum = 0.0;
    for (Eigen::Index i = 0; i < v.size(); ++i) sum += v[i] * v[i];
    return std::sqrt(sum / static_cast<double>(v.size()));
}

void note_accepted(IntegrateStats& stats, double h) {
    const double a = std::fabs(h);
    if (stats.steps_accepted == 0 || a < stats.h_min) stats.h_min = a;
    if (stats.steps_accepted == 0 || a > stats.h_max) stats.h_max = a;
    stats.steps_accepted += 1;
}

// sum = w[a] k[a] + w[b] k[b] + ... over the non-zero weights in stage
// order, starting at the first term (not at zero); false when every weight is
// zero. Zero weights are skipped: cheaper, and a non-finite stage that the
// method does not use cannot poison the sum.
bool weighted_sum(const std::vector<Coefficient>& w, std::size_t offset, std::size_t count,
                  const std::vector<Eigen::VectorXd>& k, Eigen::VectorXd& sum) {
    bool any = false;
    for (std::size_t j = 0; j < count; ++j) {
        const double wj = w[offset + j].value;
        if (wj == 0.0) continue;
        if (any) {
            for (Eigen::Index i = 0; i < sum.size(); ++i) sum[i] += wj * k[j][i];
        } else {
            for (Eigen::Index i = 0; i < sum.size(); ++i) sum[i] = wj * k[j][i];
            any = true;
        }
    }
    return any;
}

// out = y + h * (sum_j w[j] k[j]), or y itself when every weight is zero.
void combine(const Eigen::VectorXd& y, double h, const std::vector<Coefficient>& w, std::size_t offset,
             std::size_t count, const std::vector<Eigen::VectorXd>& k, Eigen::VectorXd& out) {
    Eigen::VectorXd sum(y.size());
    if (!weighted_sum(w, offset, count, k, sum)) {
        out = y;
        return;
    }
    out.resize(y.size());
    for (Eigen::Index i = 0; i < y.size(); ++i) out[i] = y[i] + h * sum[i];
}

// One step of the tableau from (t, y) with k[0] = f(t, y) already filled.
// Fills k[1..], y_new; t_new is where the step ends (used for an FSAL stage).
void rk_step(const Field& f, const Tableau& tb, double t, double h, double t_new, const Eigen::VectorXd& y,
             std::vector<Eigen::VectorXd>& k, Eigen::VectorXd& y_new, IntegrateStats& stats) {
    const std::size_t s = static_cast<std::size_t>(tb.stages);
    Eigen::VectorXd arg(y.size());
    for (std::size_t i = 1; i < s; ++i) {
        if (tb.fsal && i == s - 1) {
            // The last row of A is b: the stage is exactly f(t_new, y_new).
            combine(y, h, tb.b, 0, s - 1, k, y_new);
            f(t_new, y_new, k[i]);
        } else {
            combine(y, h, tb.a, i * (i - 1) / 2, i, k, arg);
            f(t + tb.c[i].value * h, arg, k[i]);
        }
        stats.field_evals += 1;
    }
    if (!tb.fsal) combine(y, h, tb.b, 0, s, k, y_new);
}

IntegrateStatus integrate_fixed(const Field& f, const Tableau& tb, double t0, double t1, int n_steps,
                                Eigen::VectorXd& y, IntegrateStats& stats, std::vector<StepRecord>* trace) {
    const double h = (t1 - t0) / static_cast<double>(n_steps);
    std::vector<Eigen::VectorXd> k(static_cast<std::size_t>(tb.stages), Eigen::VectorXd(y.size()));
    Eigen::VectorXd y_new(y.size());
    for (int i = 0; i < n_steps; ++i) {
        // From the index, never accumulated: no drift over many steps.
        const double ti = t0 + static_cast<double>(i) * h;
        f(ti, y, k[0]);
        stats.field_evals += 1;
        // FSAL tableaux used as fixed step: their last stage sits at ti + h.
        rk_step(f, tb, ti, h, ti + h, y, k, y_new, stats);
        if (trace) trace->push_back(StepRecord{ti, h, 0.0, true});
        note_accepted(stats, h);
        y = y_new;
        if (!y.allFinite()) return IntegrateStatus::state_not_finite;
    }
    return IntegrateStatus::ok;
}

IntegrateStatus integrate_adaptive(const Field& f, const Tableau& tb, double t0, double t1, Eigen::VectorXd& y,
                                   const SolverSpec& spec, IntegrateStats& stats, std::vector<StepRecord>* trace) {
    const std::size_t s = static_cast<std::size_t>(tb.stages);
    const int q = tb.embedded_order;
    const double d = t1 > t0 ? 1.0 : -1.0;
    const double exponent = -1.0 / (q + 1);
    const double k_pi = static_cast<double>(q + 1);

    std::vector<Eigen::VectorXd> k(s, Eigen::VectorXd(y.size()));
    Eigen::VectorXd y_new(y.size());
    Eigen::VectorXd err_vec(y.size());

    f(t0, y, k[0]);
    stats.field_evals += 1;
    double h_abs = spec.first_step > 0.0 ? spec.first_step
                                         : initial_step(f, t0, y, k[0], d, q, spec.rtol, spec.atol, stats);

    double t = t0;
    double err_prev = 1e-4;
    long attempts = 0;
    while (t != t1) {
        const double min_step = 10.0 * std::fabs(std::nextafter(t, d * std::numeric_limits<double>::infinity()) - t);
        // SciPy raises a too small step to the minimum at the start of a step;
        // only rejections within the step can end in step_too_small.
        h_abs = std::max(h_abs, min_step);
        bool rejected = false;
        for (;;) {
            if (attempts == spec.max_steps) return IntegrateStatus::step_limit;
            if (h_abs < min_step) return IntegrateStatus::step_too_small;
            double t_new = t + d * h_abs;
            if (d * (t_new - t1) > 0.0) t_new = t1;
            const double h = t_new - t;
            h_abs = std::fabs(h);

            rk_step(f, tb, t, h, t_new, y, k, y_new, stats);
            if (!weighted_sum(tb.e, 0, s, k, err_vec)) err_vec.setZero();
            for (Eigen::Index i = 0; i < y.size(); ++i) {
                const double sc = spec.atol + spec.rtol * std::max(std::fabs(y[i]), std::fabs(y_new[i]));
                err_vec[i] = h * err_vec[i] / sc;
            }
            const double err = rms(err_vec);
            attempts += 1;
            const bool accept = err < 1.0;  // false for a NaN error too
            if (trace) trace->push_back(StepRecord{t, h, err, accept});

            if (!accept) {
                // A NaN or infinite error shrinks by min-factor.
                const double shrink = spec.safety * std::pow(err, exponent);
                h_abs *= shrink > spec.min_factor ? shrink : spec.min_factor;
                stats.steps_rejected += 1;
                rejected = true;
                continue;
            }

            double factor = 0.0;
            if (err == 0.0) {
                factor = spec.max_factor;
            } else if (spec.controller == Controller::integral) {
                factor = std::min(spec.max_factor, spec.safety * std::pow(err, exponent));
            } else {
                factor = spec.safety * std::pow(err, -spec.pi_alpha / k_pi) * std::pow(err_prev, spec.pi_beta / k_pi);
                factor = std::clamp(factor, spec.min_factor, spec.max_factor);
            }
            if (spec.controller == Controller::pi) err_prev = std::max(err, 1e-4);
            if (rejected) factor = std::min(1.0, factor);
            h_abs *= factor;

            note_accepted(stats, h);
            t = t_new;
            y = y_new;
            if (!y.allFinite()) return IntegrateStatus::state_not_finite;
            if (tb.fsal) {
                std::swap(k[0], k[s - 1]);
            } else if (t != t1) {  // the next step's first stage; none after the last step
                f(t, y, k[0]);
                stats.field_evals += 1;
            }
            break;
        }
    }
    return IntegrateStatus::ok;
}

}  // namespace

double initial_step(const Field& f, double t0, const Eigen::VectorXd& y0, const Eigen::VectorXd& f0,
                    double direction, int q, double rtol, double atol, IntegrateStats& stats) {
    // Element by element, each operation as the emitted code writes it.
    const Eigen::Index n = y0.size();
    Eigen::VectorXd sc(n), q0(n), q1(n), y1(n), q2(n);
    for (Eigen::Index i = 0; i < n; ++i) {
        sc[i] = std::fabs(y0[i]) * rtol + atol;
        q0[i] = y0[i] / sc[i];
        q1[i] = f0[i] / sc[i];
    }
    const double d0 = rms(q0);
    const double d1 = rms(q1);
    const double h0 = (d0 < 1e-5 || d1 < 1e-5) ? 1e-6 : 0.01 * d0 / d1;
    const double step = h0 * direction;  // direction is +-1: exact
    for (Eigen::Index i = 0; i < n; ++i) y1[i] = y0[i] + step * f0[i];
    Eigen::VectorXd f1(n);
    f(t0 + step, y1, f1);
    stats.field_evals += 1;
    for (Eigen::Index i = 0; i < n; ++i) q2[i] = (f1[i] - f0[i]) / sc[i];
    const double d2 = rms(q2) / h0;
    const double h1 = (d1 <= 1e-15 && d2 <= 1e-15) ? std::max(1e-6, h0 * 1e-3)
                                                   : std::pow(0.01 / std::max(d1, d2), 1.0 / (q + 1));
    return std::min(100.0 * h0, h1);
}

IntegrateStatus integrate(const Field& f, double t0, double t1, Eigen::VectorXd& y, const SolverSpec& spec,
                          IntegrateStats& stats, std::vector<StepRecord>* trace) {
    const Tableau* tb = find_tableau(spec.method);
    if (tb == nullptr) return IntegrateStatus::state_not_finite;  // check_model rejects unknown methods first
    if (t0 == t1) return IntegrateStatus::ok;
    if (!tb->adaptive() || spec.steps > 0) return integrate_fixed(f, *tb, t0, t1, spec.steps, y, stats, trace);
    return integrate_adaptive(f, *tb, t0, t1, y, spec, stats, trace);
}

long worst_field_evals(const SolverSpec& spec) {
    const Tableau* tb = find_tableau(spec.method);
    if (tb == nullptr) return 0;
    const long s = tb->stages;
    if (!tb->adaptive() || spec.steps > 0) return static_cast<long>(spec.steps) * s;
    const long m = spec.max_steps;
    const long first = spec.first_step > 0.0 ? 0 : 1;
    return 1 + first + m * (s - 1) + (tb->fsal ? 0 : m);
}

}  // namespace meander
