// Check: shapes and meaning of a parsed model, before weights are read.
#pragma once

#include "../runtime/model.hpp"
#include "source.hpp"

namespace meander {

struct CheckOptions {
    Precision precision = Precision::float32;
};

// Reports every problem it finds; returns false if any was an error.
bool check_model(const Model& model, const Source& src, const CheckOptions& opts, Diagnostics& diags);

// The input's and output's options (names, units, classes, written standardisation);
// check_model calls it (compiler/check_vectors.cpp).
void check_vectors(const Model& model, const Source& src, Diagnostics& diags);

}  // namespace meander
