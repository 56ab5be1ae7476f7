// Emit for streaming models: NAME.hpp and NAME.cpp with a context that holds
// the state, reset(ctx) and observe(ctx, input, gap, output). The evolution
// is a fixed-step continuous block (its step count from the gap at run time)
// or a blend; the update a gated (GRU) or merge layer; the field, backbone and
// readout dense layers. DEVELOPERS.md "Streaming emitted API" lists the contract.
#pragma once

#include <string>
#include <vector>

#include "../runtime/model.hpp"
#include "emit.hpp"

namespace meander {

// Empty when the model can be emitted; else why not (adaptive evolution, ...).
std::string stream_emit_unsupported(const Model& model);

std::vector<EmittedFile> emit_stream(const Model& model, const EmitOptions& opts);

}  // namespace meander
