// The driver for emitted code on a board (or under ARM Linux user mode).
// Built by run_target.sh with
//   MEANDER_MODEL           the model's namespace (its name in the description)
//   MEANDER_MODEL_HEADER    "NAME.hpp"
//   MEANDER_SELFTEST_HEADER "NAME_selftest.hpp" (optional: without it no self-test runs)
//   MEANDER_TOLERANCE       the self-test tolerance, a real literal
//   MEANDER_CYCLE_MARKS     (optional) call the empty mark functions below around
//                           each inference, for `meander cost` to find them in the
//                           emulator's trace; outputs are then not printed
//   MEANDER_STREAMING       (optional) a streaming model: each row is
//                           {first row of its sequence (1/0), gap, observation...};
//                           the state is reset at a sequence's first row and
//                           every row is observed with its gap
// and board_inputs.inc, the rows of the sample's inputs.csv as brace lists.
// `meander cost` carries a copy of this file (built into the binary) and builds
// it the same way.
// It prints one line per input row (observation),
//   row R RESULT FIELD_EVALS STEPS_TAKEN STEPS_REJECTED Y0 Y1 ...
//   bits R HEX0 HEX1 ...   (the outputs' bit patterns, little-endian cores)
// then the self-test report, and returns non-zero when the self-test fails
// or the build breaks the conditions for identical bits.
#include <cstdio>
#include <cstring>

#include MEANDER_MODEL_HEADER
#if defined(MEANDER_SELFTEST_HEADER)
#include MEANDER_SELFTEST_HEADER
#endif

namespace model = MEANDER_MODEL;

namespace {

// Inputs exactly as written in the CSV (a sequence file's gaps as the host
// tools compute them); rounded to `real` the way the host tools round them
// (one conversion from double).
#if defined(MEANDER_STREAMING)
constexpr unsigned kLead = 2;  // first row of its sequence, gap
#else
constexpr unsigned kLead = 0;
#endif
const double kInputs[][kLead + model::input_size] = {
#include "board_inputs.inc"
};
constexpr unsigned kRows = sizeof kInputs / sizeof kInputs[0];

// 9 significant digits round-trip a float, 17 a double.
constexpr int kDigits = sizeof(model::real) == 4 ? 9 : 17;

// Caller-owned state; static so that the stack holds only the driver's frame.
model::context ctx;

}  // namespace

#if defined(MEANDER_CYCLE_MARKS)
// Where an inference and a block begin and end: the trace sees each function's
// one instruction (bx lr). noipa keeps every call and each function apart (no
// identical-code folding); the emitted source's block hook calls the block marks.
extern "C" {
__attribute__((noipa)) void meander_mark_row_begin() { __asm volatile("" ::: "memory"); }
__attribute__((noipa)) void meander_mark_row_end() { __asm volatile("" ::: "memory"); }
__attribute__((noipa)) void meander_mark_block_begin() { __asm volatile("" ::: "memory"); }
__attribute__((noipa)) void meander_mark_block_end() { __asm volatile("" ::: "memory"); }
}
#define MEANDER_MARK(what) meander_mark_##what()
#else
#define MEANDER_MARK(what) static_cast<void>(0)
#endif

int main() {
    model::real in[model::input_size];
    model::real out[model::output_size];
    for (unsigned r = 0; r < kRows; ++r) {
        for (unsigned i = 0; i < model::input_size; ++i) in[i] = static_cast<model::real>(kInputs[r][kLead + i]);
#if defined(MEANDER_STREAMING)
        if (kInputs[r][0] > 0.5) model::reset(ctx);
        const model::real gap = static_cast<model::real>(kInputs[r][1]);
        MEANDER_MARK(row_begin);
        const model::result res = model::observe(ctx, in, gap, out);
        MEANDER_MARK(row_end);
#else
        MEANDER_MARK(row_begin);
        const model::result res = model::infer(ctx, in, out);
        MEANDER_MARK(row_end);
#endif
        std::printf("row %u %s %lu %lu %lu", r, model::result_name(res),
                    static_cast<unsigned long>(ctx.count.field_evals),
                    static_cast<unsigned long>(ctx.count.steps_accepted),
                    static_cast<unsigned long>(ctx.count.steps_rejected));
#if defined(MEANDER_CYCLE_MARKS)
        std::printf("\n");
        continue;
#endif
        if (res == model::result::ok)
            for (unsigned i = 0; i < model::output_size; ++i) std::printf(" %.*g", kDigits, static_cast<double>(out[i]));
        std::printf("\n");
        // The same outputs as bit patterns, compared across targets.
        std::printf("bits %u", r);
        for (unsigned i = 0; i < model::output_size && res == model::result::ok; ++i) {
            unsigned char b[sizeof(model::real)];
            std::memcpy(b, &out[i], sizeof b);
            std::printf(" ");
            for (unsigned j = sizeof b; j > 0; --j) std::printf("%02x", static_cast<unsigned>(b[j - 1]));
        }
        std::printf("\n");
    }

#if !defined(MEANDER_SELFTEST_HEADER)
    std::fflush(stdout);
    return model::build_conditions_hold() ? 0 : 1;
#else
    const auto rep = model::self_test(ctx, MEANDER_TOLERANCE);
    std::printf("self-test vectors %lu failures %lu first-failing %ld max-abs %.*g max-rel %.*g build-conditions %d "
                "first-bad-result %s\n",
                static_cast<unsigned long>(rep.vectors_run), static_cast<unsigned long>(rep.failures),
                static_cast<long>(rep.first_failure), kDigits, static_cast<double>(rep.max_abs_deviation), kDigits,
                static_cast<double>(rep.max_rel_deviation), rep.build_conditions_hold ? 1 : 0,
                model::result_name(rep.first_bad_result));
    std::fflush(stdout);
    return rep.failures == 0 && rep.build_conditions_hold ? 0 : 1;
#endif
}
