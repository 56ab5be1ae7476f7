// Self-test source: NAME_selftest.hpp/.cpp with golden inputs, the outputs
// eval gave for them, and a function that runs them through `infer`.
// emit_model calls emit_self_test when EmitOptions.self_test_inputs is not
// empty; the helpers below are shared by compiler/emit/ and selftest.cpp.
#pragma once

#include <string>
#include <string_view>
#include <vector>

#include "../runtime/model.hpp"
#include "emit.hpp"

namespace meander {

// NAME_selftest.hpp and NAME_selftest.cpp. The vector count is
// min(self_test_inputs.size(), self_test_outputs.size()).
std::vector<EmittedFile> emit_self_test(const Model& model, const EmitOptions& opts);

namespace emit_detail {

// A literal of the emitted `real`: float32 rounds to float and prints fmt's
// shortest float form with an `f` suffix ("0.1f", "1.0f", "-3e-08f"); float64
// prints the shortest double form ("0.1", "1.0"). Values beyond the type's
// range print as HUGE_VALF/HUGE_VAL (from <cmath>).
std::string real_literal(double v, Precision p);

// "PUMP_WEAR" for "pump_wear": the prefix of the emitted macros.
std::string macro_prefix(const std::string& model_name);

std::string real_type(Precision p);      // "float" or "double"
std::string version_of(const EmitOptions& opts);

// Banner lines shared by every emitted file (each line starts with "// ").
std::string banner(const Model& model, const EmitOptions& opts, std::string_view file_name);

// `name[count]` initialiser rows: `per_row` literals per line, indented 4.
std::string array_rows(const std::vector<double>& values, Precision p, int per_row = 8);

}  // namespace emit_detail

}  // namespace meander
