// The bound model: plain data shared by every stage after parsing.
// The parser fills names, sizes and locations; bind_weights fills the
// matrices. Nothing here knows about text or files.
#pragma once

#include <Eigen/Dense>
#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

namespace meander {

// 1-based line and byte column in the description; 0 means "no position".
struct Loc {
    int line = 0;
    int col = 0;
};

enum class Precision { float32, float64 };

// How a dense layer's weights are stored in the emitted code: as reals, or as
// 8- or 16-bit integers with one scale per output row (compiler/quantise.hpp).
// Biases, state and activations stay in the working precision.
enum class WeightStorage { real, int8, int16 };

// Spelling used in descriptions and on the command line ("float", "int8", "int16").
std::string_view weight_storage_name(WeightStorage s);
std::optional<WeightStorage> weight_storage_from_name(std::string_view s);

// A `weights-as` statement or option as written.
struct StorageChoice {
    WeightStorage storage = WeightStorage::real;
    Loc loc;                        // position of the storage's name
};

enum class Activation { identity, relu, leaky_relu, tanh, sigmoid, softplus, silu, gelu, elu, softmax };

// Spelling used in descriptions ("leaky-relu", "gelu", ...).
std::string_view activation_name(Activation a);
std::optional<Activation> activation_from_name(std::string_view s);

struct Dense {
    std::string name;
    Loc loc;                        // position of the layer's name
    int in = 0;                     // declared input width, without time
    bool time_input = false;        // "+ t": t joins the input as its last column
    int out = 0;
    Activation act = Activation::identity;
    double act_param = 0.0;         // leaky-relu slope, elu alpha (defaults applied by the parser)
    std::string weight_tensor;      // resolved tensor names (default "<prefix>.weight"/"<prefix>.bias")
    std::string bias_tensor;
    std::string tensor_prefix;      // the default prefix: the layer's name, or "P.K" in a body numbered "P"
    bool has_bias = true;
    // Layout of the weight tensor in the file (the layer's own option or its block's `layout`):
    bool transposed = false;        // stored (in, out) instead of (out, in)
    bool time_first = false;        // the time column ('+ t') first instead of last
    Eigen::MatrixXd weight;         // out x (in + time_input); filled by bind_weights
    Eigen::VectorXd bias;           // out (size 0 when !has_bias); filled by bind_weights
    std::optional<StorageChoice> storage_asked;  // the layer's own `weights-as` option
    // Filled by quantise_model (compiler/quantise.hpp) when the layer is stored as integers:
    // `weight` then holds the dequantised weights fl(q * s) in the working precision.
    WeightStorage storage = WeightStorage::real;
    std::vector<std::int32_t> qweight;  // out x in_total, row-major
    std::vector<double> qscale;     // out: one scale per row, a value of the working precision
    std::string kept_real;          // asked for integers but kept in the working precision: why

    int in_total() const { return in + (time_input ? 1 : 0); }
};

enum class Controller { integral, pi };

struct SolverSpec {
    std::string method;             // key of a tableau in runtime/tableau.hpp
    Loc loc;                        // position of the method name
    int steps = 0;                  // fixed-step methods: number of equal steps
    double steps_per_unit = 0.0;    // fixed-step methods over a run-time gap: ceil(gap * steps_per_unit) equal steps
    double rtol = 0.0;              // adaptive methods
    double atol = 0.0;
    int max_steps = 0;              // adaptive: attempted steps (accepted + rejected) allowed
    double first_step = 0.0;        // adaptive: 0 = automatic (HNW I, II.4)
    Controller controller = Controller::integral;
    double safety = 0.9;
    double min_factor = 0.2;
    double max_factor = 10.0;
    double pi_alpha = 0.7;          // PI controller (Gustafsson 1991): exponents alpha/k and beta/k,
    double pi_beta = 0.4;           // k = embedded order + 1
    // Which options were written, so the canonical form and diagnostics can tell defaults apart.
    std::vector<std::string> written;
};

struct Block;

// How a block's layers name and lay out their tensors: its `numbered` and `layout` statements.
struct BodyTensors {
    std::string numbered;           // "P": the body's modules are P.0, P.1, ... (a dense layer, then its
                                    // activation as a module of its own; a nested block one module)
    Loc numbered_loc;
    bool transposed = false;        // every dense layer inside stores its weight (in, out)
    bool time_first = false;        // every dense layer inside with '+ t' stores the time column first
    Loc layout_loc;
};

struct Residual {
    std::string name;
    Loc loc;
    int width = 0;
    std::optional<StorageChoice> storage_asked;  // `weights-as` in the body: its layers' default
    std::vector<Block> body;        // dense layers and residual blocks; output width == width
    BodyTensors tensors;
};

struct Continuous {
    std::string name;
    Loc loc;
    int width = 0;                  // width of the incoming state
    int augment = 0;                // zero-filled extra state dimensions (Dupont et al. 2019)
    std::optional<StorageChoice> storage_asked;  // `weights-as` in the block: its layers' default
    double t0 = 0.0;
    double t1 = 1.0;
    Loc interval_loc;
    std::vector<Block> field;       // f(h, t): maps width+augment -> width+augment
    BodyTensors tensors;
    SolverSpec solver;
    std::optional<SolverSpec> trained;  // solver the model was trained with, if recorded
    // The evolution of a streaming model: the interval is [0, gap], the gap known only at run time.
    bool over_gap = false;
    // The evolution is the closed-form continuous-time cell (Hasani et al. 2022), not an ODE: `field`
    // holds a backbone and then three heads f, g, k; h(gap) = s * g + (1 - s) * k, s = sigmoid(-f * gap).
    bool blend = false;

    int state() const { return width + augment; }  // also the block's output width
};

struct Block {
    enum class Kind { dense, residual, continuous };
    Kind kind = Kind::dense;
    Dense dense;
    Residual residual;
    Continuous continuous;
};

// A streaming model (one with a `state` statement): for each observation x, after a gap dt,
//   h = evolve(h, dt); h = update(h, x); y = readout(h)
// with h zero after a reset. The readout is Model::blocks, fed with the state.
struct Stream {
    Loc loc;                        // the `state` statement
    std::string state_name;
    Loc state_loc;
    int state_size = 0;
    double largest_gap = 0.0;
    Loc gap_loc;
    bool has_evolve = false;
    Continuous evolve;              // over_gap; an ODE (with its solver) or a blend
    enum class Update { none, gated, merge };
    Update update = Update::none;
    std::string update_name;
    Loc update_loc;
    int update_in = 0;              // gated: the observation width; merge: the state width
    int update_obs = 0;             // merge: the observation width
    int update_out = 0;
    // gated (a GRU cell, PyTorch GRUCell): [ih, hh], weights (3H, in) and (3H, H) in gate order r, z, n;
    // merge: [dense], act(W [h; x] + b).
    std::vector<Block> update_layers;
};

// What the description says about the values of the input or the output vector
// (options of its `input` or `output` statement).
// `standardised`: the network works on standardised values. An input value x reaches the
// first layer as (x - mean) / scale; an output y of the last layer leaves as y * scale + mean.
// mean and scale come from tensors of the weights file (names given) or from the description.
struct Standardised {
    Loc loc;                        // the keyword
    std::string mean_tensor;        // empty: written in the description
    std::string scale_tensor;
    Loc mean_loc;                   // the tensor name's quote or the '[' of the written values
    Loc scale_loc;
    std::vector<Loc> mean_value_locs;   // each written value (empty for a tensor)
    std::vector<Loc> scale_value_locs;
    Eigen::VectorXd mean;           // written ones: filled by the parser; tensors: by bind_weights
    Eigen::VectorXd scale;
};

struct VectorInfo {
    std::vector<std::string> names;     // `names [a, b in "unit", ...]`: one per value, or empty
    std::vector<std::string> units;     // "" where no unit is given
    std::vector<Loc> name_locs;
    Loc names_loc;                      // the keyword
    std::vector<std::string> classes;   // output only: `classes [a, b, ...]`, one per value of a classifier
    std::vector<Loc> class_locs;
    Loc classes_loc;
    std::optional<Standardised> standardised;
};

// The name of value i of a vector: its given name, or "vec.i".
inline std::string value_name(const VectorInfo& info, const std::string& vector, int i) {
    const auto k = static_cast<std::size_t>(i);
    if (k < info.classes.size()) return info.classes[k];
    if (k < info.names.size()) return info.names[k];
    return vector + "." + std::to_string(i);
}

// Which parameters the emitted code may change on the device (`learn ...` or compile --learn):
// every bias, the last top-level layer, named dense layers, or all. `by` chooses how the gradient
// goes back through a continuous block: through its steps (exact; memory grows with the steps) or
// by the adjoint method (memory independent of the steps).
struct LearnSpec {
    enum class What { biases, head, layers, all };
    enum class Way { steps, adjoint };
    What what = What::all;
    Loc loc;                        // the statement (or no position for the option)
    std::vector<std::string> layers;  // What::layers
    std::vector<Loc> layer_locs;
    Way way = Way::steps;
    Loc way_loc;                    // position of the way's word when written
    bool way_written = false;
};

struct Model {
    std::string name;               // becomes the C++ namespace
    Loc loc;
    std::string weights_path;       // as written; relative to the description's folder
    Loc weights_loc;
    std::string weights_key;        // `under "KEY/PATH"`: a nested dictionary of a checkpoint; empty for none
    std::vector<std::string> ignore;  // `ignore "PATTERN", ...`: tensors the model leaves unused (globs: * and ?)
    std::vector<Loc> ignore_locs;     // each pattern's opening quote
    BodyTensors tensors;            // a top-level `layout` statement: for every layer of the model
    std::string input_name;
    int input_size = 0;
    Loc input_loc;
    std::string output_name;
    int output_size = 0;
    Loc output_loc;
    VectorInfo input_info;          // names, units and standardisation of the input's values
    VectorInfo output_info;         // of the output's values, and class labels
    std::optional<StorageChoice> storage_asked;  // the model's `weights-as` statement: every layer's default
    std::vector<Block> blocks;
    std::optional<Stream> stream;   // set for a streaming model; `blocks` is then its readout
    std::optional<LearnSpec> learn; // what may learn on the device; none: nothing (inference only)
};

// The name of a layer or block, and the width it hands to what follows.
inline const std::string& block_name(const Block& b) {
    switch (b.kind) {
    case Block::Kind::residual: return b.residual.name;
    case Block::Kind::continuous: return b.continuous.name;
    case Block::Kind::dense: break;
    }
    return b.dense.name;
}

inline int block_out_width(const Block& b) {
    switch (b.kind) {
    case Block::Kind::residual: return b.residual.width;
    case Block::Kind::continuous: return b.continuous.state();
    case Block::Kind::dense: break;
    }
    return b.dense.out;
}

// Calls f(const Dense&) for every dense layer, in description order, through
// residual bodies and fields.
template <class F>
void for_each_dense(const std::vector<Block>& blocks, F&& f) {
    for (const Block& b : blocks) {
        switch (b.kind) {
        case Block::Kind::dense: f(b.dense); break;
        case Block::Kind::residual: for_each_dense(b.residual.body, f); break;
        case Block::Kind::continuous: for_each_dense(b.continuous.field, f); break;
        }
    }
}

// for_each_dense over the whole model: the blocks, then a streaming model's evolution and update.
template <class F>
void for_each_model_dense(const Model& m, F&& f) {
    for_each_dense(m.blocks, f);
    if (!m.stream) return;
    for_each_dense(m.stream->evolve.field, f);
    for_each_dense(m.stream->update_layers, f);
}

}  // namespace meander
