// The emitter's parts: each renders one part of NAME.hpp / NAME.cpp from the
// lowered plan. emit.cpp puts them together in file order:
//   header.cpp       banner and the header's contract (sizes, result codes, context)
//   weights.cpp      weight and bias tables
//   activations.cpp  math and activation kernels
//   dense.cpp        dense layer kernels
//   integrators.cpp  fields and continuous blocks (the unrolled Runge-Kutta loops)
//   entry.cpp        chains of layers, infer, result_name
//   c_header.cpp     NAME.h for C callers and the extern "C" entry points
//   vectors.cpp      names, units and classes of the input's and output's values,
//                    standardisation tables, most_probable
//   learn.cpp        learning on the device: parameter block, gradient, SGD step
#pragma once

#include <set>
#include <string>

#include "../../runtime/model.hpp"
#include "../emit.hpp"
#include "../lower.hpp"
#include "../selftest.hpp"

namespace meander::emit_detail {

// A maths function of the emitted code: float32 calls meander's own kernel
// (runtime/math_float.inc), float64 the C++ library's.
inline std::string math_call(Precision p, const char* name) {
    return p == Precision::float32 ? std::string(name) + "_kernel" : std::string("std::") + name;
}

// What every part reads: the model, the options and the lowered plan.
struct Emission {
    Emission(const Model& m, const EmitOptions& o) : model(m), opts(o), p(o.precision), low(lower_model(m, p)) {}
    const Model& model;
    const EmitOptions& opts;
    Precision p;
    Lowered low;

    std::string L(double v) const { return real_literal(v, p); }
    std::string M() const { return macro_prefix(model.name); }
    std::string real_name() const { return real_type(p); }
    std::string math(const char* name) const { return math_call(p, name); }
};

// The name of a dense layer's weight arrays and kernel (w_X, b_X, dense_X): its
// own name, but for the two halves of a streaming model's GRU cell, which share
// the cell's name: X_ih and X_hh (with '_' added until no layer has that name).
std::string layer_symbol(const Model& m, const Dense& d);

// header.cpp: NAME.hpp with kStampHole where the stamp goes; stamp_of hashes
// that text, finish_header puts the stamp in.
extern const char* const kStampHole;
std::string render_header(const Emission& e);
std::string stamp_of(const std::string& hpp);
std::string finish_header(std::string hpp);

// weights.cpp
std::string render_weights(const Emission& e);

// activations.cpp: the kernels the model's layers use, and a call of one.
// render_activation_kernels renders them for a set of activations (plus pow
// and nextafter for a step-size controller); the streaming emitter, whose
// layers are not all in model.blocks, calls it directly.
std::string render_activations(const Emission& e);
std::string render_activation_kernels(Precision p, const std::set<Activation>& used, bool step_controller,
                                      bool log = false, const std::set<Activation>& four_lanes = {});
std::string apply_activation(const Emission& e, const Dense& d, const std::string& x);
std::string apply_activation(Precision p, const Dense& d, const std::string& x);
// The four-lane kernel (runtime/math_lanes.inc, x86 SSE2) that a layer's
// activation goes through four outputs at a time, or null: float32 layers of
// at least four outputs whose activation has one.
const char* four_lane_kernel(Precision p, const Dense& d);

// dense.cpp. Outputs go in blocks of kDenseBlockRows with one accumulator
// each, the rows left over in a last smaller block (weights.cpp interleaves
// the weights to match); a block's loop over the inputs is written out when a
// layer has at most kUnrollInputs columns. render_dense_steps: the blocks'
// accumulate steps (lanesR_*), which render_dense_layers puts first. On x86
// with SSE2 a layer whose inputs are written out and which has at most
// kUnrollBlocks blocks of kDenseBlockRows also has its loops over the blocks
// and over the four-lane activations unrolled by GCC (a pragma).
inline constexpr int kDenseBlockRows = 4;
inline constexpr int kUnrollInputs = 16;
inline constexpr int kUnrollBlocks = 4;
std::string render_dense_includes(const Emission& e);  // the SSE2 intrinsics' header, when a layer needs it
std::string render_dense_steps(const Emission& e);
std::string render_dense_layers(const Emission& e);

// integrators.cpp
std::string render_continuous(const Emission& e, const ContinuousPlan& cp);

// entry.cpp. `chain` renders a chain's statements; `in`/`out` are the pointer
// expressions of the chain's own input and output; `top`: the model's own
// chain (checks finiteness after every layer, as the reference evaluator
// does, and runs continuous blocks).
bool chain_uses_work(const Chain& c);
void render_chain(const Emission& e, std::string& o, const Chain& c, const std::string& in, const std::string& out,
                  const std::string& pad, bool top);
std::string render_infer(const Emission& e);
// `streaming`: with the gap_out_of_range case of streaming models.
std::string render_result_name(bool streaming = false);
std::string render_build_check(Precision p);  // also the streaming emitter's

// c_header.cpp: NAME.h with kStampHole where its stamp goes (finish_header puts it
// in), and the end of NAME.cpp that checks that stamp and defines the entry points.
std::string render_c_header(const Emission& e);
std::string render_c_entry(const Emission& e, const std::string& c_stamp);

// vectors.cpp. Declarations for the header (inside the namespace), the
// standardisation tables (in the source's anonymous namespace, beside the
// weights) and the definitions of the name tables and most_probable.
bool emits_most_probable(const Model& model);  // a softmax head, or classes given
std::string render_vector_declarations(const Emission& e);
std::string render_standardisation_tables(const Emission& e);
std::string render_vector_definitions(const Emission& e);
// learn.cpp: with EmitOptions::learn, the header's and the source's learning
// sections, and the activation kernels the derivatives need beyond the model's.
std::string render_learn_header(const Emission& e);
std::string render_learn_source(const Emission& e);
std::set<Activation> learn_kernel_needs(const Emission& e);
bool learn_needs_log(const Emission& e);

}  // namespace meander::emit_detail
