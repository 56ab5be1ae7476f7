// The driver for a streaming model's emitted code on a board (or under ARM
// Linux user mode). Built by run_target.sh with
//   MEANDER_MODEL         the model's namespace (its name in the description)
//   MEANDER_MODEL_HEADER  "NAME.hpp"
// and board_inputs.inc, the sample's sequence file as brace lists
// {first row of its sequence (1/0), gap, observation...}. It resets the state
// at each sequence's first row and prints two lines per observation,
//   row R RESULT FIELD_EVALS STEPS_TAKEN STEPS_REJECTED Y0 Y1 ...
//   bits R HEX0 HEX1 ...
// then whether the build keeps the conditions for identical bits, and returns
// non-zero when it does not.
#include <cstdio>
#include <cstring>

#include MEANDER_MODEL_HEADER

namespace model = MEANDER_MODEL;

namespace {

// Gaps and observations exactly as the host tools compute and read them,
// rounded to `real` once.
const double kRows[][2 + model::input_size] = {
#include "board_inputs.inc"
};
constexpr unsigned kCount = sizeof kRows / sizeof kRows[0];

// 9 significant digits round-trip a float, 17 a double.
constexpr int kDigits = sizeof(model::real) == 4 ? 9 : 17;

model::context ctx;

}  // namespace

int main() {
    model::real in[model::input_size];
    model::real out[model::output_size];
    for (unsigned r = 0; r < kCount; ++r) {
        if (kRows[r][0] > 0.5) model::reset(ctx);
        for (unsigned i = 0; i < model::input_size; ++i) in[i] = static_cast<model::real>(kRows[r][2 + i]);
        const model::result res = model::observe(ctx, in, static_cast<model::real>(kRows[r][1]), out);
        std::printf("row %u %s %lu %lu %lu", r, model::result_name(res),
                    static_cast<unsigned long>(ctx.count.field_evals),
                    static_cast<unsigned long>(ctx.count.steps_accepted),
                    static_cast<unsigned long>(ctx.count.steps_rejected));
        if (res == model::result::ok)
            for (unsigned i = 0; i < model::output_size; ++i) std::printf(" %.*g", kDigits, static_cast<double>(out[i]));
        std::printf("\n");
        // The same outputs as bit patterns, compared across targets (as board_main.cpp prints them).
        std::printf("bits %u", r);
        for (unsigned i = 0; i < model::output_size && res == model::result::ok; ++i) {
            unsigned char b[sizeof(model::real)];
            std::memcpy(b, &out[i], sizeof b);
            std::printf(" ");
            for (unsigned j = sizeof b; j > 0; --j) std::printf("%02x", static_cast<unsigned>(b[j - 1]));
        }
        std::printf("\n");
    }
    const bool held = model::build_conditions_hold();
    std::printf("build-conditions %d\n", held ? 1 : 0);
    std::fflush(stdout);
    return held ? 0 : 1;
}
