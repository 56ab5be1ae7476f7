// Cost, measured part: the emitted source compiled for a core with the
// bare-metal cross compiler, and code, constant and stack bytes read from the
// object (its section sizes, -fstack-usage and -fcallgraph-info files).
#pragma once

#include <set>
#include <string>
#include <utility>
#include <vector>

#include "cost.hpp"

namespace meander {

// Whether `tool` is an executable on PATH (or at that path when it holds a '/').
bool on_path(const std::string& tool);

// A top-level block's name and every layer and block name inside it.
using BlockNames = std::vector<std::pair<std::string, std::set<std::string>>>;

// Compiles `files` for `core` and fills the report's code, constant, data and
// stack figures and its per-function sizes (attributed to `block_names`).
bool measure_object(const Model& model, const std::vector<EmittedFile>& files, const CostOptions& opts, CoreClass core,
                    const BlockNames& block_names, CostReport& rep, Diagnostics& diags);

}  // namespace meander
