// Labels: held-out target values for the model's outputs, one CSV row per
// input row, and the task metric computed against them: per-output RMSE and
// MAE for regression, accuracy and cross-entropy when the model ends in a
// softmax layer.
#pragma once

#include <Eigen/Dense>
#include <optional>
#include <string>
#include <vector>

#include "../runtime/model.hpp"
#include "source.hpp"

namespace meander {

struct Labels {
    std::string path;
    std::vector<Eigen::VectorXd> rows;  // output width; a softmax head's class index becomes one-hot
};

// A softmax head: the model's last block is a dense layer with softmax.
bool is_classifier(const Model& model);

// Reads `path`: `rows` rows (one per input row) of the output width, or, for
// a softmax head, of one class index 0..K-1 each; a header line of the output's
// width is checked against its names (check_csv_header). A wrong row count, a wrong
// column count, a value that is not finite, or a class index out of range is
// an error naming the file, the line and the expected shape.
std::optional<Labels> read_labels(const std::string& path, const Model& model, std::size_t rows, Diagnostics& diags);

struct TaskMetric {
    bool classification = false;
    int rows = 0;
    std::vector<double> rmse;       // regression: per output
    std::vector<double> mae;
    double accuracy = 0.0;          // classification: argmax of output == argmax of label
    double cross_entropy = 0.0;     // mean of -sum label * log(output), natural log
    // The one number to compare (lower is better): the RMSE over every output
    // and row for regression, the cross-entropy for classification.
    double score = 0.0;
};

// outputs[i] and labels.rows[i] belong to the same input row.
TaskMetric task_metric(bool classification, const std::vector<Eigen::VectorXd>& outputs, const Labels& labels);

// "RMSE 0.0123 (y.0 0.01, y.1 0.014), MAE ..." or "accuracy 92.5%, cross-entropy 0.213".
std::string metric_text(const TaskMetric& m, const Model& model);
// Short, for a table cell: the score with its name.
std::string metric_cell(const TaskMetric& m);
std::string metric_name(bool classification);

}  // namespace meander
