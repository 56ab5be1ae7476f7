// The driver for the emitted learning code on a board (or the host): the drift
// calibration of samples/fan_balance/drift, built by learn_target.sh with
//   MEANDER_MODEL         the model's namespace
//   MEANDER_MODEL_HEADER  "NAME.hpp" (compiled with --learn)
//   MEANDER_EPOCHS, MEANDER_RATE, MEANDER_CLIP   the schedule, real literals
// and learn_rows.inc / heldout_rows.inc, each row {inputs..., targets...}.
// It prints the held-out loss before, after every epoch and at the end, the
// bits of the gradient of the first row and of the final parameters (an
// FNV-1a hash), so runs on different cores can be compared bit for bit; with
// MEANDER_CENTRAL_DIFFERENCES, also central differences of the loss of the
// first row against the gradient, and it fails when they disagree.
//
// Two measuring modes run each row of learn_rows.inc once instead (no
// heldout_rows.inc, no epochs):
//   MEANDER_CYCLE_MARKS  (meander cost --learn) per row, the learning infer (the
//                        forward part) and then one learn_step, each between the
//                        row marks, printing "row R RESULT FIELD_EVALS 0 0" for each
//                        (R = 2 x row for the forward part, 2 x row + 1 for the step).
//   MEANDER_STEP_TICKS   (tests/target/learn_icount.sh, run with qemu -icount) per
//                        row, the SysTick counts that one learn_step takes, and those
//                        of a loop of known instruction count, to convert them.
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstring>

#include MEANDER_MODEL_HEADER

namespace model = MEANDER_MODEL;

namespace {

constexpr std::size_t kWidth = model::input_size + model::output_size;
const double kLearn[][kWidth] = {
#include "learn_rows.inc"
};
#if !defined(MEANDER_CYCLE_MARKS) && !defined(MEANDER_STEP_TICKS)
const double kHeldout[][kWidth] = {
#include "heldout_rows.inc"
};
#endif

model::learn_context lctx;
model::parameters p, g, q, scratch;

void split(const double* row, model::real* x, model::real* t) {
    for (std::size_t i = 0; i < model::input_size; ++i) x[i] = static_cast<model::real>(row[i]);
    for (std::size_t i = 0; i < model::output_size; ++i) t[i] = static_cast<model::real>(row[model::input_size + i]);
}

#if !defined(MEANDER_CYCLE_MARKS) && !defined(MEANDER_STEP_TICKS)
// Mean loss over the held-out rows and the share whose largest output is the target's largest.
void heldout(const char* what) {
    double sum = 0.0;
    unsigned agree = 0;
    const unsigned n = sizeof kHeldout / sizeof kHeldout[0];
    for (unsigned r = 0; r < n; ++r) {
        model::real x[model::input_size], t[model::output_size], y[model::output_size];
        split(kHeldout[r], x, t);
        model::real loss = 0;
        if (model::gradient(lctx, p, x, t, g, loss) != model::learn_result::ok) std::printf("row %u failed\n", r);
        model::infer(lctx, p, x, y);
        std::size_t top_y = 0, top_t = 0;
        for (std::size_t i = 1; i < model::output_size; ++i) {
            if (y[i] > y[top_y]) top_y = i;
            if (t[i] > t[top_t]) top_t = i;
        }
        agree += top_y == top_t ? 1u : 0u;
        sum += static_cast<double>(loss);
    }
    std::printf("heldout %s loss %.6f agree %u/%u\n", what, sum / n, agree, n);
}

std::uint64_t hash(const void* data, std::size_t n) {
    std::uint64_t h = 0xcbf29ce484222325ULL;
    const unsigned char* b = static_cast<const unsigned char*>(data);
    for (std::size_t i = 0; i < n; ++i) h = (h ^ b[i]) * 0x100000001b3ULL;
    return h;
}
#endif

}  // namespace

#if defined(MEANDER_CYCLE_MARKS)
// The trace sees each mark function's one instruction (as in board_main.cpp); the
// emitted block hook (in the blocks before the first learnable layer) calls the block marks.
extern "C" {
__attribute__((noipa)) void meander_mark_row_begin() { __asm volatile("" ::: "memory"); }
__attribute__((noipa)) void meander_mark_row_end() { __asm volatile("" ::: "memory"); }
__attribute__((noipa)) void meander_mark_block_begin() { __asm volatile("" ::: "memory"); }
__attribute__((noipa)) void meander_mark_block_end() { __asm volatile("" ::: "memory"); }
}

int main() {
    model::init_parameters(p);
    const unsigned n = sizeof kLearn / sizeof kLearn[0];
    for (unsigned r = 0; r < n; ++r) {
        model::real x[model::input_size], t[model::output_size], y[model::output_size], loss = 0;
        split(kLearn[r], x, t);
        meander_mark_row_begin();
        const model::learn_result f = model::infer(lctx, p, x, y);
        meander_mark_row_end();
        std::printf("row %u %s %lu 0 0\n", 2 * r, model::learn_result_name(f),
                    static_cast<unsigned long>(lctx.count.field_evals));
        meander_mark_row_begin();
        const model::learn_result s = model::learn_step(lctx, p, x, t, MEANDER_RATE, MEANDER_CLIP, loss);
        meander_mark_row_end();
        std::printf("row %u %s %lu 0 0\n", 2 * r + 1, model::learn_result_name(s),
                    static_cast<unsigned long>(lctx.count.field_evals));
    }
    std::fflush(stdout);
    return model::build_conditions_hold() ? 0 : 1;
}

#elif defined(MEANDER_STEP_TICKS)
// SysTick (ARMv7-M architecture reference manual, B3.3): a 24-bit down-counter on the
// processor clock. Under qemu -icount the clock advances with the instructions executed.
namespace {
volatile std::uint32_t* const kSystCsr = reinterpret_cast<volatile std::uint32_t*>(0xE000E010u);
volatile std::uint32_t* const kSystRvr = reinterpret_cast<volatile std::uint32_t*>(0xE000E014u);
volatile std::uint32_t* const kSystCvr = reinterpret_cast<volatile std::uint32_t*>(0xE000E018u);
std::uint32_t ticks_since(std::uint32_t start) { return (start - *kSystCvr) & 0xFFFFFFu; }
}  // namespace

int main() {
    *kSystRvr = 0xFFFFFFu;
    *kSystCvr = 0u;
    *kSystCsr = 5u;  // enabled, processor clock, no interrupt
    // The known loop: 2 instructions per turn (subs, bne), 1,000,000 turns.
    std::uint32_t turns = 1000000u;
    const std::uint32_t c0 = *kSystCvr;
    __asm volatile("1: subs %0, %0, #1\n\tbne 1b" : "+r"(turns) : : "cc");
    std::printf("calibration 2000000 instructions %lu ticks\n", static_cast<unsigned long>(ticks_since(c0)));
    model::init_parameters(p);
    const unsigned n = sizeof kLearn / sizeof kLearn[0];
    for (unsigned r = 0; r < n; ++r) {
        model::real x[model::input_size], t[model::output_size], loss = 0;
        split(kLearn[r], x, t);
        const std::uint32_t s0 = *kSystCvr;
        const model::learn_result s = model::learn_step(lctx, p, x, t, MEANDER_RATE, MEANDER_CLIP, loss);
        const std::uint32_t ticks = ticks_since(s0);
        std::printf("step %u %s %lu ticks\n", r, model::learn_result_name(s), static_cast<unsigned long>(ticks));
    }
    std::fflush(stdout);
    return 0;
}

#else
int main() {
    model::init_parameters(p);
    int failures = 0;
    model::real x[model::input_size], t[model::output_size], loss = 0;
    split(kLearn[0], x, t);
    model::gradient(lctx, p, x, t, g, loss);
    std::printf("bits gradient %016llx\n", static_cast<unsigned long long>(hash(g.value, sizeof g.value)));
    std::printf("field_evals %lu of %lu\n", static_cast<unsigned long>(lctx.count.field_evals),
                static_cast<unsigned long>(model::learn_field_evals));
#if defined(MEANDER_CENTRAL_DIFFERENCES)
    // Central differences, step 1e-6 in float64 (truncation ~1e-12, rounding ~1e-10 relative).
    double scale = 0.0;
    for (std::size_t i = 0; i < model::learnable_count; ++i) scale = std::fmax(scale, std::fabs(g.value[i]));
    double worst = 0.0;
    for (std::size_t i = 0; i < model::learnable_count; i += 7) {
        model::real lp = 0, lm = 0;
        q = p;
        q.value[i] = p.value[i] + 1e-6;
        model::gradient(lctx, q, x, t, scratch, lp);
        q = p;
        q.value[i] = p.value[i] - 1e-6;
        model::gradient(lctx, q, x, t, scratch, lm);
        const double fd = static_cast<double>(lp - lm) / 2e-6;
        worst = std::fmax(worst, std::fabs(fd - static_cast<double>(g.value[i])) / scale);
    }
    std::printf("central differences: largest |fd - g| / max|g| %.3g\n", worst);
    if (!(worst < 1e-6)) ++failures;
#endif
    heldout("before");
    const unsigned n = sizeof kLearn / sizeof kLearn[0];
    for (int epoch = 1; epoch <= MEANDER_EPOCHS; ++epoch) {
        double sum = 0.0;
        for (unsigned r = 0; r < n; ++r) {
            split(kLearn[r], x, t);
            const model::learn_result res = model::learn_step(lctx, p, x, t, MEANDER_RATE, MEANDER_CLIP, loss);
            if (res != model::learn_result::ok) {
                std::printf("epoch %d row %u: %s\n", epoch, r, model::learn_result_name(res));
                ++failures;
            }
            sum += static_cast<double>(loss);
        }
        std::printf("epoch %d learn loss %.6f\n", epoch, sum / n);
    }
    heldout("after");
    std::printf("bits parameters %016llx\n", static_cast<unsigned long long>(hash(p.value, sizeof p.value)));
    return failures;
}
#endif
