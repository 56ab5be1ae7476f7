// Lower: a checked model -> plain data the emitter (and `cost`) follow: where
// every layer reads and writes in the caller's workspace, how large the
// workspace is, and what one inference costs.
//
// Workspace (one array of reals, offsets in reals): the top level is a chain
// of blocks reading the caller's input and writing the caller's output, with
// two ping-pong buffers between them. Each residual body and each continuous
// block's field is a chain of its own, with its own ping-pong buffers placed
// after its parent's (a stack: blocks that run one after the other share
// addresses). A continuous block owns its state, stage buffers k_1..k_s, the
// stage argument and, when adaptive, y_new; its field's buffers follow them.
#pragma once

#include <cstddef>
#include <optional>
#include <string>
#include <vector>

#include "../runtime/model.hpp"
#include "../runtime/tableau.hpp"

namespace meander {

// Where a layer reads or writes: the chain's own input or output (a pointer
// the caller of the chain passes), or a fixed place in the workspace.
struct Slot {
    enum class Kind { chain_in, chain_out, work };
    Kind kind = Kind::work;
    std::size_t offset = 0;         // in reals; for Kind::work
};

struct ChainOp;

// Layers run in order; op 0 reads chain_in, the last op writes chain_out.
struct Chain {
    std::vector<ChainOp> ops;
};

struct ContinuousPlan {
    const Continuous* block = nullptr;
    const Tableau* tableau = nullptr;
    std::size_t n = 0;              // state size (width + augment)
    std::size_t y = 0;              // state
    std::vector<std::size_t> k;     // stage derivatives k_1..k_s
    std::size_t arg = 0;            // stage argument y + h sum_j a_ij k_j (and the initial step's Euler step)
    std::size_t y_new = 0;          // adaptive only: the propagated solution of an attempt
    bool adaptive = false;
    bool over_gap = false;          // a streaming model's evolution: t from 0 to the gap given at run time
    Chain field;                    // chain_in = the point, chain_out = the derivative
    long macs_per_field_eval = 0;
    long worst_field_evals = 0;
};

struct ChainOp {
    const Block* block = nullptr;   // dense, residual or (top level only) continuous
    Slot src, dst;
    int in_width = 0;
    int out_width = 0;
    Chain body;                     // residual: g, reading src and writing dst; then dst += src
    ContinuousPlan cont;            // continuous: its region and field
};

// One named buffer, for the dump and for `cost`.
struct Buffer {
    std::string name;               // "top.ping0", "settle.k3", "polish.ping1", ...
    std::size_t offset = 0;
    std::size_t size = 0;
    std::string role;
};

// A streaming model (Model::stream): per observation the state, copied from the
// context into `h`, evolves over the gap (an ODE's plan, or a blend's backbone
// and heads), is updated (a GRU cell's two halves, or a merge layer on [h; x])
// and read out by `top` (chain_in = h, chain_out = the caller's output). The
// evolution, the update and the readout run one after another, so their
// regions all start after h and share addresses.
struct StreamPlan {
    std::size_t h = 0;              // the new state, S reals
    ContinuousPlan evolve;          // an ODE evolution (block == nullptr for a blend)
    Chain backbone;                 // blend: chain_in = h, chain_out = bb (empty: the heads read h)
    std::size_t bb = 0, f = 0, g = 0, k = 0;
    bool gated = false;             // the update: a GRU cell (else a merge layer)
    std::size_t gi = 0, gh = 0;     // gated: W_ih x + b_ih and W_hh h + b_hh, 3S each
    std::size_t hx = 0;             // merge: [h; x]
};

struct Lowered {
    std::string model_name;
    Precision precision = Precision::float32;
    int input_size = 0;
    int output_size = 0;
    Chain top;                      // chain_in = caller's input (a streaming model: h), chain_out = caller's output
    std::optional<StreamPlan> stream;
    std::vector<Buffer> buffers;    // in allocation order
    std::size_t workspace_size = 0; // reals
    std::size_t workspace_bytes = 0;
    long parameter_count = 0;       // weights and biases
    long parameter_bytes = 0;       // their tables' bytes: integer weights with their scales, reals, biases
    bool integer_weights = false;   // some layer stores its weights as integers
    long macs_per_field_eval = 0;   // summed over the continuous blocks' fields (one evaluation each)
    long macs_outside_fields = 0;   // dense layers outside continuous blocks, one inference
    long worst_field_evals = 0;     // summed over continuous blocks (runtime/integrate.hpp worst_field_evals)
    long worst_macs = 0;            // macs_outside_fields + sum of field MACs x worst evaluations
};

// `model` must have passed check_model (weights need not be bound). The
// result points into `model`, which must outlive it.
Lowered lower_model(const Model& model, Precision precision);

// Every continuous block's plan, in model order (a streaming model's evolution
// first; pointers into `lowered`).
std::vector<const ContinuousPlan*> continuous_plans(const Lowered& lowered);

// Text for `--dump=lower`.
std::string dump_lowered(const Lowered& lowered);

}  // namespace meander
