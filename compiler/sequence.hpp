// Sequence files: the input of a streaming model. A CSV whose rows are
// observations: a sequence id, a time stamp, then the observation's values.
// The rows of one sequence are together and their time stamps increase; the
// state is reset where a new sequence id begins.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "../runtime/evaluate.hpp"
#include "source.hpp"

namespace meander {

struct SequenceRow {
    std::string id;
    double time = 0.0;
    double gap = 0.0;               // since the previous row of the sequence; 0 for its first row
    bool first = false;             // the first row of its sequence: the state is reset before it
    std::vector<double> values;
    int line = 0;                   // 1-based line in the file
};

// Every problem is reported with its line: a wrong column count, a value that is not a number,
// a time stamp that is not finite, goes backwards or repeats within a sequence, a gap larger
// than `largest_gap`, a sequence id that returns after another began.
// With `float32_range`, values beyond the largest float are errors too. With `vector_name`
// and `info` (the input's), a header's observation columns are checked as check_csv_header
// says (source.hpp); the sequence id's and time stamp's columns may be named freely.
std::optional<std::vector<SequenceRow>> read_sequence_file(const std::string& path, int width, double largest_gap,
                                                           Diagnostics& diags, bool float32_range = false,
                                                           std::string_view vector_name = {}, const VectorInfo* info = nullptr);

// A streaming model over every row, the state reset to zero where a sequence begins: one result per row.
std::vector<EvalResult> evaluate_sequences(const Model& model, const std::vector<SequenceRow>& rows);

}  // namespace meander
