// Expect: `check --input rows.csv --expect outputs.csv`, the proof that the
// description and its weights are the model that was trained. The reference
// evaluation runs over the input rows and is compared with the outputs the
// training framework wrote for the same rows. When they disagree, the usual
// export mistakes are tried one at a time on a copy of the model (a square
// weight stored (in, out), a time column stored first, logits written instead
// of probabilities and the other way round, standardisation missing, made with
// other tensors or doubled: compiler/expect_mistakes.hpp); each one that makes
// them agree is named at the layer or statement to change, with the option to
// add or drop or the statement to write.
#pragma once

#include <string>

#include "load.hpp"
#include "source.hpp"

namespace meander {

// The default of `--tolerance`: |meander - expected| <= tolerance * max(1, |expected|).
// Loose enough for a framework's float32 forward pass, far below what any export
// mistake gives.
inline constexpr double kExpectTolerance = 1e-4;

// Evaluates `loaded` over the rows of `input_path` (a sequence file for a streaming
// model) and compares with `expect_path` (a CSV of output rows, one per input row,
// an optional header line, checked against the output's names as check_csv_header
// says). Returns true when every value agrees; prints a summary
// line into `summary`. Disagreement, a file of the wrong shape and rows that do not
// evaluate are errors in `diags`; a mistake that explains a disagreement is a note
// at its layer in the description. The standardisation candidates come from
// `loaded.loose_vectors`.
bool check_expected(const LoadedModel& loaded, const std::string& input_path, const std::string& expect_path,
                    double tolerance, Diagnostics& diags, std::string& summary);

}  // namespace meander
