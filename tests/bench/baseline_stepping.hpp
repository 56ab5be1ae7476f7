// Adaptive step-size control for the hand-written baselines, around a
// Boost.Odeint error stepper. Odeint's own controlled stepper uses other
// rules (a max norm scaled by the old state only, its own growth and shrink
// factors, no initial step selection), so a baseline driven by it would take
// other steps than the deployed solver. A competent engineer who must match a
// trained model's solver writes the rules out; these are the ones of
// DEVELOPERS.md "Integrator semantics" (SciPy 1.10 solve_ivp's RK45/RK23:
// rms error norm scaled by max(|y|, |y_new|), select_initial_step, integral
// controller with a cap after a rejection), in float like the emitted code.
#pragma once

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <limits>

namespace meander_bench::baseline {

struct StepRules {
    float rtol;
    float atol;
    int max_steps;        // attempts, accepted and rejected
    float first_step;     // 0: select it (one more field evaluation)
    float safety;
    float min_factor;
    float max_factor;
    int error_order;      // q of the embedded pair p(q): factors use err^(-1/(q+1))
};

template <class Vec>
float rms(const Vec& v) {
    return std::sqrt(v.squaredNorm() / static_cast<float>(v.size()));
}

// Integrates y from t0 to t1 (either direction). `field(y, dy, t)` is the
// right-hand side; `attempt(y, k, t, h, y_new, k_new, err)` one step of the
// embedded pair from (t, y) with k = f(t, y), giving y_new, k_new = f(t + h,
// y_new) and the error estimate. Returns false when the step budget runs out,
// the step becomes too small or the state stops being finite.
template <class Vec, class Field, class Attempt>
bool integrate_adaptive(Field& field, Attempt& attempt, float t0, float t1, Vec& y, const StepRules& r) {
    const float d = t1 >= t0 ? 1.0f : -1.0f;
    const float grow_exp = -1.0f / static_cast<float>(r.error_order + 1);
    Vec k;
    field(y, k, t0);
    float h_abs = r.first_step;
    if (!(h_abs > 0.0f)) {  // HNW II.4, as SciPy's select_initial_step
        const Vec sc = (y.array().abs() * r.rtol + r.atol).matrix();
        const float d0 = rms((y.array() / sc.array()).matrix());
        const float d1 = rms((k.array() / sc.array()).matrix());
        const float h0 = (d0 < 1e-5f || d1 < 1e-5f) ? 1e-6f : 0.01f * d0 / d1;
        const Vec y1 = y + d * h0 * k;
        Vec k1;
        field(y1, k1, t0 + d * h0);
        const float d2 = rms(((k1 - k).array() / sc.array()).matrix()) / h0;
        const float dmax = std::max(d1, d2);
        const float h1 = dmax <= 1e-15f ? std::max(1e-6f, h0 * 1e-3f) : std::pow(0.01f / dmax, -grow_exp);
        h_abs = std::min(100.0f * h0, h1);
    }
    float t = t0;
    int attempts = 0;
    Vec y_new, k_new, err;
    while (t != t1) {
        const float min_step = 10.0f * std::fabs(std::nextafter(t, d * std::numeric_limits<float>::infinity()) - t);
        h_abs = std::max(h_abs, min_step);
        bool rejected = false;
        for (;;) {
            if (attempts == r.max_steps || h_abs < min_step) return false;
            float t_new = t + d * h_abs;
            if (d * (t_new - t1) > 0.0f) t_new = t1;
            const float h = t_new - t;
            h_abs = std::fabs(h);
            attempt(y, k, t, h, y_new, k_new, err);
            ++attempts;
            const Vec sc = (y.array().abs().max(y_new.array().abs()) * r.rtol + r.atol).matrix();
            const float e = rms((err.array() / sc.array()).matrix());
            if (e < 1.0f) {
                float factor = e == 0.0f ? r.max_factor : std::min(r.max_factor, r.safety * std::pow(e, grow_exp));
                if (rejected) factor = std::min(1.0f, factor);
                h_abs *= factor;
                t = t_new;
                y = y_new;
                k = k_new;
                if (!y.allFinite()) return false;
                break;
            }
            // Also when e is NaN: the largest cut.
            h_abs *= std::isfinite(e) ? std::max(r.min_factor, r.safety * std::pow(e, grow_exp)) : r.min_factor;
            rejected = true;
        }
    }
    return true;
}

}  // namespace meander_bench::baseline
