// Load: the front of every command, in a line: read the description, parse,
// check, read the weights, bind them, and hash what went in.
#pragma once

#include <optional>
#include <string>

#include "../runtime/model.hpp"
#include "quantise.hpp"
#include "source.hpp"
#include "weights.hpp"

namespace meander {

struct LoadedModel {
    Source source;
    Model model;
    std::string content_hash;       // "fnv1a64:<16 hex digits>" of description and weights bytes
    std::vector<StorageNote> storage_notes;  // layers asked for integer weights that stay real, zero rows
    // The weights file's vectors (shape (N,) or (1, N), finite) that no layer binds: the
    // ignored ones and the standardisation's own. `check --expect` pairs them as the
    // standardisation a description may lack (compiler/expect_mistakes.hpp).
    std::vector<Tensor> loose_vectors;
};

// Weights are read from the model's `weights` path, relative to the
// description's folder. `precision` is the one code will be emitted in (it sets
// the rtol floor and the weight range checks). Without weights, only the
// description is hashed and the matrices stay empty.
// The model's weights path as the description names it, relative to its folder.
std::string weights_path_of(const Model& model, const std::string& description_path);

// With weights, the dense layers take the storage the description asks for
// (`weights-as`), or `storage` for every layer when given (quantise_model).
std::optional<LoadedModel> load_model(const std::string& path, Precision precision, Diagnostics& diags,
                                      bool with_weights = true, std::optional<WeightStorage> storage = std::nullopt);

// The storage notes as diagnostic notes at each layer's name.
void report_storage_notes(const LoadedModel& loaded, Diagnostics& diags);

}  // namespace meander
