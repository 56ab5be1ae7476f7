// Weights: read NumPy .npy/.npz, a folder of .npy files, a weight listing
// (.mnw), a PyTorch torch.save checkpoint or a safetensors file, and bind the
// tensors to the model's layers.
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "../runtime/model.hpp"
#include "source.hpp"

namespace meander {

struct Tensor {
    std::string name;
    std::vector<std::size_t> shape;
    std::vector<double> values;     // C order, converted exactly from the stored dtype
    std::string dtype;              // "float32", "float64"; from frameworks also "float16", "bfloat16", "int64", ...
};

struct TensorSet {
    std::string path;
    std::vector<Tensor> tensors;    // in file order
    const Tensor* find(const std::string& name) const;
};

// How much one weights file may bring into memory: the file's size, and for a
// zip archive (.npz, torch.save) the inflated bytes of the members read. The
// readers stop at the limit, before reading or inflating what would pass it.
inline constexpr std::uint64_t kMaxWeightsBytes = std::uint64_t{256} << 20;     // any weights file
// Given a description: what its layers bind, kWeightsSlack times over at 8
// bytes a value (float64, or a checkpoint with optimiser state), plus an
// allowance for headers, the pickle and small extras.
inline constexpr std::uint64_t kWeightsSlack = 4;
inline constexpr std::uint64_t kWeightsAllowance = std::uint64_t{4} << 20;
// Replaces both limits with this many MiB when set.
inline constexpr const char* kWeightsLimitVariable = "MEANDER_WEIGHTS_LIMIT_MIB";

struct WeightsLimit {
    std::uint64_t bytes = kMaxWeightsBytes;
    // Why this many, and how to raise it, for the diagnostic.
    std::string basis = "256 MiB, meander's limit for a weights file; set MEANDER_WEIGHTS_LIMIT_MIB to raise it";
};

// Values the model's layers bind: every dense layer's weight and bias, through
// residual bodies, continuous fields, blends, the gated and merge updates and
// the readout.
std::uint64_t bound_values(const Model& model);

// The limit for reading `model`'s weights (null: no description): the smaller
// of kMaxWeightsBytes and what the model binds, or kWeightsLimitVariable's
// value when it is set (an error when it is not a whole number of MiB from 1
// to 1048576).
std::optional<WeightsLimit> weights_limit(const Model* model, Diagnostics& diags);

// By the path: "*.npz", "*.npy" (one tensor, named after the file's stem),
// a folder (every "*.npy" in it, named after their stems, sorted by name),
// "*.mnw" (weight listing), "*.pt"/"*.pth" (torch.save), "*.safetensors".
// `key_path` ("model/state_dict") selects a nested dictionary of tensors in a
// checkpoint; it is an error for the other formats. `model`, when given, sets
// the limit (weights_limit).
std::optional<TensorSet> read_weights(const std::string& path, Diagnostics& diags, const std::string& key_path = "",
                                      const Model* model = nullptr);

// Fills every Dense's weight and bias; reports missing, extra, misshapen and
// non-finite tensors at the layer's position in the description. A tensor that
// no layer binds is an error unless it matches one of the model's `ignore`
// patterns. A layer's layout options say how its weight is stored: (in, out)
// with `transposed`, the time column first with `time-first`.
// With `binding`, it receives one entry per tensor of the set: what binds it
// ("f1 weight", "ignored", or empty for nothing).
bool bind_weights(Model& model, const Source& src, const TensorSet& set, Diagnostics& diags,
                  std::vector<std::string>* binding = nullptr);

// The shape a dense layer's weight tensor has in the file, and the flat index in
// it of the model's W(row, col) ((out, in + t) with time last): the layout options
// of the layer applied. Binding reads through it; writers of weight files write through it.
std::vector<std::size_t> stored_weight_shape(const Dense& d);
std::size_t stored_weight_index(const Dense& d, std::size_t row, std::size_t col);

// A tensor name pattern of an `ignore` statement: '*' any run of characters (dots too), '?' one.
bool name_matches(std::string_view pattern, std::string_view name);

// Weights the chosen precision cannot hold: a value beyond the float32 range
// is an error (it would become infinite), values that flush to zero a warning.
bool check_weight_range(const Model& model, const Source& src, Precision precision, Diagnostics& diags);

// The weight listing text of a tensor set (round-trips exactly).
std::string write_listing(const TensorSet& set);

// Raw bytes of the weights source, for the content hash (a folder: its files in name order).
std::optional<std::string> weights_bytes(const std::string& path, Diagnostics& diags);

}  // namespace meander
