// The cost of a streaming model per observation: the worst case at the
// largest gap (field evaluations, multiply-accumulates, estimated cycles),
// and, over a sequence file, the spread of field evaluations; flash, RAM and
// stack of the emitted code compiled for the core (compiler/cost_object), and
// cycles per observation measured on the emulated cores (compiler/cost_cycles:
// the board driver observing the sequence file, the state reset at each
// sequence; one sequence of one observation of zeros without a file).
#pragma once

#include <map>
#include <optional>
#include <string>
#include <vector>

#include "../runtime/model.hpp"
#include "cost.hpp"
#include "sequence.hpp"
#include "source.hpp"

namespace meander {

// Per-observation counts over the rows of a sequence file.
struct ObservationSpread {
    int rows = 0;
    int failed_rows = 0;            // observations whose result was not ok
    double min = 0, median = 0, p95 = 0, max = 0;
};

// The static cycle estimate of one observation on one core (float32 figures; float64 has
// none): from the model's counts and the core's figures (compiler/stream_cost.cpp,
// stream_figures), with the field evaluations each observation takes.
struct StreamCoreCycles {
    CoreClass core = CoreClass::cortex_m4f;
    bool estimated = false;
    double cycles_per_mac = 0.0;
    double cycles_per_int_mac = 0.0;               // layers whose weights are int8 or int16
    double cycles_per_output = 0.0;
    double cycles_per_state_eval = 0.0;            // fixed-step methods
    double cycles_per_adaptive_state_eval = 0.0;   // embedded pairs
    double cycles_per_gated_element = 0.0;
    double cycles_per_observation = 0.0;           // observe's own work, with its state-size part
    std::map<std::string, double> activation_cycles;  // by kind, the model's kinds
    double worst = 0.0;                     // at the largest gap with the worst-case evaluations
    std::optional<double> median;           // median over the sequence file's observations
    std::optional<double> at_largest_gap;   // the observation measured at the largest gap
};

struct StreamCost {
    std::string model;
    CoreClass core = CoreClass::cortex_m4f;
    double cycles_per_mac = 0.0;
    std::string mac_source;
    double largest_gap = 0.0;
    std::string evolution;          // "continuous 'drift', rk4, steps-per-unit 2" or "blend 'cell' (closed form)"
    long parameters = 0;
    long weight_bytes = 0;          // weight tables as emitted (integers with their scales) and biases
    bool integer_layers = false;    // some layer's weights are stored as int8 or int16
    long macs_per_field_eval = 0;   // the evolution's field
    long worst_field_evals = 0;     // per observation, at the largest gap (evolution and readout)
    long double worst_macs = 0;     // per observation, at the largest gap
    double worst_cycles = 0;        // worst_macs * cycles_per_mac (multiply-accumulates only)
    std::optional<ObservationSpread> field_evals;  // measured, with a sequence file
    std::optional<ObservationSpread> macs;
    // The emitted code: RAM (the context: state, workspace and counters), and from the
    // object compiled for the core (when the cross tools are there) code, constants,
    // stack, and the measured cycles (object.streaming is set).
    long state_size = 0;
    long workspace_bytes = 0;
    long context_bytes = 0;
    CostReport object;
    // Cycles of one observation at the largest gap after a reset (the values of the file's row
    // with the largest gap, or zeros), per emulated core.
    std::vector<MeasuredCycles> at_largest_gap;
    // The estimate per core, the chosen core first.
    std::vector<StreamCoreCycles> cycles;
};

// `rows`: a sequence file's rows, or empty.
// The static estimate of one observation's cycles on `core` at worst (at the largest
// gap, the evolution and every readout block at their worst-case evaluations): the
// `worst` of measure_stream_cost's estimate; nullopt in float64.
std::optional<double> estimate_worst_observation_cycles(const Model& model, CoreClass core, Precision p);

std::optional<StreamCost> measure_stream_cost(const Model& model, const std::vector<SequenceRow>& rows,
                                              const CostOptions& opts, Diagnostics& diags);
std::string render_stream_cost_text(const StreamCost& c);
std::string render_stream_cost_json(const StreamCost& c);

}  // namespace meander
