// Cycles measured on the emulated cores: the emitted code built with the
// project's bare-metal driver (tests/target/board_main.cpp, startup.cpp and
// mps2.ld, carried inside the meander binary), run on qemu's MPS2 boards over
// the input rows in one emulator run per core, every executed instruction read
// from qemu's translation log (`-d in_asm,exec,nochain`: each translated block's
// instructions once, then one line per executed block) and priced with the
// core's published timings (compiler/cycle_prices.hpp).
#pragma once

#include <string>
#include <vector>

#include "cost.hpp"

namespace meander {

struct CyclesOptions {
    std::string cross_prefix = "arm-none-eabi-";
    std::string qemu = "qemu-system-arm";
    std::string keep_dir;                // non-empty: build there (one folder per core) and keep the files
    double timeout_seconds = 600.0;      // per emulator run
    // Learning on the device (files emitted with --learn): each row is {inputs..., targets...};
    // the driver is tests/target/board_learn_main.cpp, which runs per row the learning infer
    // (the forward part) and one learn_step with `rate` and `clip` (real literals).
    bool learning = false;
    std::string rate = "0.01f";
    std::string clip = "1.0f";
};

// Builds and runs `files` (the emitted float32 or float64 code) on each core in
// `cores`. `rows` are the inputs (a streaming model's: {first row of its sequence
// (1/0), gap, observation...}, and its parts count as blocks: the evolution 0, the
// update 1, readout block i 2 + i); `evals_per_block[r][b]` the field evaluations
// of top-level block b in row r by the reference (for counting activations when
// the model has more than one continuous block; with one, the emitted code's own
// count, which the driver prints, is used). Returns false with a diagnostic when a build or run
// fails; tools missing is not an error: `missing` then names the first one.
// With opts.learning, each MeasuredCycles' cycles and instructions are per learning
// step, `forward_cycles` and `forward_instructions` those of the forward part (the
// learning infer with the same parameters), and the per-layer figures are unknown.
bool measure_cycles(const Model& model, const std::vector<EmittedFile>& files, const std::vector<CoreClass>& cores,
                    const std::vector<std::vector<double>>& rows,
                    const std::vector<std::vector<long>>& evals_per_block, const CyclesOptions& opts,
                    std::vector<MeasuredCycles>& out, std::string& missing, Diagnostics& diags);

// The qemu board of a core class ("mps2-an386"); empty when qemu has none.
std::string board_of(CoreClass core);

}  // namespace meander
