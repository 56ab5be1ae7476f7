// Cost: what the emitted code of a model takes on a microcontroller: flash
// (weights and code), RAM (workspace and stack), multiply-accumulates, field
// evaluations and an estimated cycle count, per block and in total.
//
// Code and stack bytes are measured by compiling the emitted source for the
// chosen core with the bare-metal cross compiler when it is on PATH (the
// sizes of its .text sections, its -fstack-usage and -fcallgraph-info
// files); otherwise code bytes are estimated and marked so. Cycles are an
// estimate from per-operation figures whose sources the report states.
#pragma once

#include <functional>
#include <map>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "../runtime/model.hpp"
#include "emit.hpp"
#include "source.hpp"

namespace meander {

enum class CoreClass { cortex_m0, cortex_m3, cortex_m4f, cortex_m7 };

std::string_view core_name(CoreClass c);                         // "cortex-m4f"
std::optional<CoreClass> core_from_name(std::string_view name);  // nullopt when unknown
std::string unknown_core(std::string_view name);                 // "unknown core class 'NAME' (known: ...)"
const std::vector<CoreClass>& all_cores();

// The default figures of a core class and where they come from.
struct CoreFigures {
    CoreClass core = CoreClass::cortex_m4f;
    std::vector<std::string> cross_flags;   // arm-none-eabi-g++ flags selecting the core and its float ABI
    bool single_fpu = false;                // hardware single-precision floating point
    double cycles_per_mac = 0.0;            // float32, one multiply and one add
    std::string mac_source;
    double cycles_per_activation = 0.0;     // one exp-based activation (tanh, sigmoid, ...); 0: no figure
    std::string activation_source;
    // Measured per-kernel figures (float32): cycles of one evaluation by activation
    // name; kinds not listed take cycles_per_activation.
    std::map<std::string, double> activation_cycles;
    double cycles_per_state_eval = 0.0;     // solver and checks, per state element per field evaluation
    std::string state_eval_source;
    // A MAC of a layer whose weights are stored as int8 or int16 (each weight
    // loaded, converted and scaled before its multiply); every core has one.
    double cycles_per_int_mac = 0.0;
    std::string int_mac_source;
};
const CoreFigures& core_figures(CoreClass c);

struct CostOptions {
    Precision precision = Precision::float32;
    std::string core = "cortex-m4f";       // a core_name(); code is compiled for it, cycles estimated for it
    double cycles_per_mac = -1.0;           // < 0: the core's default figure
    // Rows to measure field evaluations on (each of model.input_size values);
    // empty: only the exact / worst-case counts.
    std::vector<std::vector<double>> inputs;
    // Prefix of the cross tools (`<prefix>g++`, `<prefix>size`); empty: do
    // not measure, estimate code bytes.
    std::string cross_prefix = "arm-none-eabi-";
    // Non-empty: compile in this folder and keep the files (for tests and
    // for a look at the object); otherwise a temporary folder is removed.
    std::string keep_dir;
    // Measure cycles on the emulated cores (compiler/cost_cycles.hpp) when the
    // cross tools and qemu are on PATH; false: the static estimate only.
    bool measure_cycles = true;
    std::string qemu = "qemu-system-arm";
    // The emitter's options for the measured code (banner, C entry point);
    // its precision is replaced by `precision`, self-test vectors are ignored.
    EmitOptions emit;
};

// Field evaluations per inference over the rows of an input file.
struct EvalSpread {
    int rows = 0;
    int failed_rows = 0;                    // rows whose evaluation ended with a result other than ok
    long min = 0;
    double median = 0.0;
    long max = 0;
};

struct BlockCost {
    std::string name;
    std::string kind;                       // "dense", "residual", "continuous"
    std::string solver;                     // continuous: "rk4, 8 steps", "dormand-prince, max-steps 64"
    bool adaptive = false;
    long parameters = 0;                    // weights and biases
    long weight_bytes = 0;                  // weight tables as emitted and biases, in flash
    long code_bytes = -1;                   // .text of the functions named after this block; -1: none attributable
    long workspace_bytes = 0;               // the block's own buffers in the workspace (lowering plan)
    long macs_per_field_eval = 0;           // continuous only
    long field_evals = 0;                   // continuous: exact (fixed step) or worst case (adaptive); else 0
    std::optional<EvalSpread> measured;     // continuous, when inputs were given
    long macs = 0;                          // per inference, with `field_evals` evaluations
    long int_macs_per_field_eval = 0;       // continuous only: the part of macs_per_field_eval in integer layers
    long int_macs = 0;                      // the part of `macs` in integer layers
    long activations = 0;                   // exp-based activation evaluations per inference (worst case)
};

struct FunctionSize {
    std::string name;                       // demangled
    long code_bytes = 0;
    long stack_bytes = -1;                  // its own frame (-fstack-usage); -1 unknown
    std::string block;                      // the block it is attributed to, or empty
};

struct CoreCycles {
    CoreClass core = CoreClass::cortex_m4f;
    double cycles_per_mac = 0.0;
    double cycles_per_int_mac = 0.0;        // integer-weight layers' MACs
    double cycles_per_activation = 0.0;     // over this model's activations (the per-kind figures weighted by count)
    double cycles_per_state_eval = 0.0;
    bool estimated = false;                 // false: no figure for this precision (no estimate)
    double worst = 0.0;                     // cycles per inference, worst case
    std::optional<double> median;           // with the measured median field evaluations
};

// Cycles measured on an emulated core (compiler/cost_cycles.hpp).
struct CycleSpread {
    double min = 0.0;
    double median = 0.0;
    double max = 0.0;
};

struct MeasuredBlockCycles {
    std::string name;
    CycleSpread cycles;
};

struct MeasuredCycles {
    CoreClass core = CoreClass::cortex_m4f;
    std::string machine;                 // qemu board, "mps2-an386"
    std::string compiler;                // "arm-none-eabi-g++ 12.2.1 -mcpu=... -Os -ffp-contract=off"
    std::string emulator;                // "qemu-system-arm 7.2.22"
    std::string timings;                 // the document and rules the prices come from
    int rows = 0;
    int failed_rows = 0;                 // rows whose infer returned a result other than ok
    CycleSpread cycles;                  // per inference
    CycleSpread instructions;            // per inference
    std::vector<MeasuredBlockCycles> blocks;  // top-level blocks, from the timing hook
    // Over all rows: cycles of the instructions whose innermost source function is a
    // dense layer's (the multiply-accumulate loops, bias and stores) per MAC; -1 unknown.
    double dense_cycles_per_mac = -1.0;
    // Cycles of the activation kernels (inlined into the dense functions or called
    // from them) per activation evaluation, by activation name, and over all.
    std::map<std::string, double> activation_cycles;
    double cycles_per_activation = -1.0;
    double other_cycles = 0.0;           // mean per inference of the rest (solver, checks, copies)
    double dense_cycles_total = 0.0;     // over all rows: the dense layers' own code
    double activation_cycles_total = 0.0;  // over all rows: the activation kernels
    std::vector<std::string> unpriced;   // mnemonics not in the table (priced 1 cycle each)
    // Learning (compiler/learn_cost.cpp): `cycles` and `instructions` are per learning
    // step, these per forward part (the learning infer with the step's parameters).
    CycleSpread forward_cycles;
    CycleSpread forward_instructions;
};

// One dense layer's weight table in each storage (compiler/quantise.hpp): the
// weights and, for integers, one scale per row; biases are not counted.
struct LayerStorage {
    std::string name;
    WeightStorage storage = WeightStorage::real;   // as emitted
    long weights = 0;
    long bytes = 0;                         // as emitted
    long real_bytes = 0, int8_bytes = 0, int16_bytes = 0;
    std::string kept_real;                  // asked for integers, kept real: why
};

struct CostReport {
    std::string model;
    Precision precision = Precision::float32;
    CoreClass core = CoreClass::cortex_m4f;
    int real_bytes = 4;
    std::vector<BlockCost> blocks;          // top-level blocks in model order

    long parameters = 0;
    long weight_bytes = 0;                  // weight tables as emitted (integers with their scales) and biases
    std::vector<LayerStorage> layers;       // every dense layer, in description order

    bool code_measured = false;             // false: code_bytes is an estimate
    std::string code_tool;                  // "arm-none-eabi-g++ 12.2.1 -mcpu=cortex-m4 ... -Os" when measured
    long code_bytes = 0;                    // .text sections of the emitted object (or the estimate)
    long rodata_bytes = -1;                 // .rodata sections (weights and other constants); -1 unknown
    long data_bytes = -1;                   // .data + .bss (mutable globals; 0 for emitted code); -1 unknown
    std::vector<FunctionSize> functions;    // measured only, in object order

    long workspace_bytes = 0;               // the emitted header's workspace_bytes
    long shared_workspace_bytes = 0;        // the buffers that carry results between top-level blocks
    long context_bytes = 0;                 // workspace plus the counters (sizeof(context) on 32-bit cores)

    bool stack_measured = false;
    long entry_stack_bytes = -1;            // infer's own frame (-fstack-usage)
    long stack_bytes = -1;                  // deepest chain of emitted functions from infer (-fcallgraph-info)
    std::vector<std::string> stack_chain;   // that chain, infer first
    std::vector<std::string> library_calls; // functions outside the emitted code infer may reach (tanhf, ...)

    long macs_outside_fields = 0;           // dense layers outside continuous blocks, per inference
    long macs_per_field_eval = 0;           // summed over continuous blocks
    long field_evals = 0;                   // per inference, summed: exact or worst case
    bool any_adaptive = false;
    std::optional<EvalSpread> measured;     // total per inference, when inputs were given
    long macs = 0;                          // per inference, worst case
    long int_macs = 0;                      // of those, in integer-weight layers
    long activations = 0;                   // per inference, worst case

    double cycles_per_mac = 0.0;            // the figure used for `core`
    bool cycles_per_mac_overridden = false;
    std::vector<CoreCycles> cycles;         // `core` first, then the other classes

    std::vector<MeasuredCycles> measured_cycles;  // one per emulated core (cortex-m4f, cortex-m3, cortex-m7)
    std::string cycles_not_measured;              // why there is no measured figure (empty when there is)
    bool measured_on_zero_row = false;            // no --input: one row of zeros was run
    bool streaming = false;                       // a streaming model's: per observation (observe)
};

// `model` must have passed check_model and bind_weights (the emitter needs
// the weights, the measured evaluations run the reference evaluator).
std::optional<CostReport> measure_cost(const Model& model, const CostOptions& opts, Diagnostics& diags);

// The static estimate of one inference's cycles on `core` with the core's own
// figures (what measure_cost reports as `worst` or `median`), with `evals(i)`
// field evaluations in the model's top-level block i (continuous blocks; the
// others run once); nullopt in float64, which has no figures.
std::optional<double> estimate_cycles(const Model& model, CoreClass core, Precision p,
                                      const std::function<double(std::size_t)>& evals);

std::string render_cost_text(const CostReport& report);
std::string render_cost_json(const CostReport& report);
// The measured cycles' part of each (also for a streaming model's cost): the text
// section, and the JSON array "measured" (as JSON text).
std::string render_measured_text(const CostReport& report);
std::string render_measured_json(const CostReport& report);

}  // namespace meander
