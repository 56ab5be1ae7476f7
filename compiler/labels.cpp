#include "labels.hpp"

#include <fmt/format.h>

#include <cmath>

#include "format.hpp"

namespace meander {

namespace {

// The byte column where field `index` of a CSV line starts.
int field_column(std::string_view line, std::size_t index) {
    std::size_t pos = 0;
    for (std::size_t i = 0; i < index; ++i) {
        const std::size_t comma = line.find(',', pos);
        if (comma == std::string_view::npos) break;
        pos = comma + 1;
    }
    return static_cast<int>(pos) + 1;
}

}  // namespace

bool is_classifier(const Model& model) {
    return !model.blocks.empty() && model.blocks.back().kind == Block::Kind::dense &&
           model.blocks.back().dense.act == Activation::softmax;
}

std::optional<Labels> read_labels(const std::string& path, const Model& model, std::size_t rows, Diagnostics& diags) {
    const bool classes = is_classifier(model);
    const int k = model.output_size;
    const std::string shape = classes ? fmt::format("{} rows of {} values, or of 1 class index 0..{} (one row per input row)",
                                                    rows, k, k - 1)
                                      : fmt::format("{} rows of {} values (one row per input row)", rows, k);
    auto src = load_source(path, diags);
    if (!src) return std::nullopt;
    // Width: the output's, or 1 for class indices (told by the first row).
    int width = k;
    if (classes) {
        for (int li = 1; li <= static_cast<int>(src->line_starts.size()); ++li) {
            const std::string_view line = src->line_text(li);
            // Blank, comment and header lines (no digit) say nothing; the first row decides.
            if (line.empty() || line.front() == '#' || line.find_first_of("0123456789") == std::string_view::npos) continue;
            if (line.find(',') == std::string_view::npos) width = 1;
            break;
        }
    }
    const int errors = diags.error_count();
    std::vector<int> lines;
    bool header_only = false;
    // Rows of the output's width have their header checked against its names; a column of class
    // indices may be headed freely.
    auto values = width == k ? read_csv_rows(path, width, diags, false, &lines, model.output_name, &model.output_info,
                                             "output", &header_only)
                             : read_csv_rows(path, width, diags, false, &lines);
    if (!values) {
        // The shape the file must have, unless the only trouble is its header's names.
        if (diags.error_count() > errors && !header_only) diags.note(*src, Loc{}, "expected " + shape);
        return std::nullopt;
    }
    Labels out;
    out.path = path;
    for (std::size_t r = 0; r < values->size(); ++r) {
        const auto& row = (*values)[r];
        const int line = lines[r];
        for (std::size_t c = 0; c < row.size(); ++c) {
            if (!std::isfinite(row[c])) {
                diags.error(*src, Loc{line, field_column(src->line_text(line), c)},
                            fmt::format("a label must be a finite number, not {}; expected {}", format_double(row[c]), shape));
                return std::nullopt;
            }
        }
        Eigen::VectorXd v = Eigen::VectorXd::Zero(k);
        if (width == 1 && classes) {
            const double c = row[0];
            if (c != std::floor(c) || c < 0 || c >= k) {
                diags.error(*src, Loc{line, 1},
                            fmt::format("class index {} is not one of 0..{}; expected {}", format_double(c), k - 1, shape));
                return std::nullopt;
            }
            v[static_cast<Eigen::Index>(c)] = 1.0;
        } else {
            v = Eigen::Map<const Eigen::VectorXd>(row.data(), k);
        }
        out.rows.push_back(v);
    }
    if (out.rows.size() != rows) {
        // Point at the first extra row, or just past the last one.
        const int line = out.rows.size() > rows ? lines[rows] : (lines.empty() ? 1 : lines.back() + 1);
        diags.error(*src, Loc{line, 1},
                    fmt::format("the labels hold {} rows, the inputs {}: expected {}", out.rows.size(), rows, shape));
        return std::nullopt;
    }
    return out;
}

TaskMetric task_metric(bool classification, const std::vector<Eigen::VectorXd>& outputs, const Labels& labels) {
    TaskMetric m;
    m.classification = classification;
    m.rows = static_cast<int>(outputs.size());
    if (outputs.empty()) return m;
    const Eigen::Index k = outputs[0].size();
    const double n = static_cast<double>(outputs.size());
    if (classification) {
        double correct = 0, ce = 0;
        for (std::size_t r = 0; r < outputs.size(); ++r) {
            Eigen::Index got = 0, want = 0;
            outputs[r].maxCoeff(&got);
            labels.rows[r].maxCoeff(&want);
            if (got == want) correct += 1;
            for (Eigen::Index i = 0; i < k; ++i)
                if (labels.rows[r][i] > 0) ce -= labels.rows[r][i] * std::log(std::max(outputs[r][i], 1e-300));
        }
        m.accuracy = correct / n;
        m.cross_entropy = ce / n;
        m.score = m.cross_entropy;
        return m;
    }
    Eigen::ArrayXd se = Eigen::ArrayXd::Zero(k), ae = Eigen::ArrayXd::Zero(k);
    for (std::size_t r = 0; r < outputs.size(); ++r) {
        const Eigen::ArrayXd d = (outputs[r] - labels.rows[r]).array();
        se += d.square();
        ae += d.abs();
    }
    for (Eigen::Index i = 0; i < k; ++i) {
        m.rmse.push_back(std::sqrt(se[i] / n));
        m.mae.push_back(ae[i] / n);
    }
    m.score = std::sqrt(se.sum() / (n * static_cast<double>(k)));
    return m;
}

std::string metric_name(bool classification) { return classification ? "cross-entropy" : "RMSE"; }

std::string metric_cell(const TaskMetric& m) { return fmt::format("{:.4g}", m.score); }

std::string metric_text(const TaskMetric& m, const Model& model) {
    if (m.classification)
        return fmt::format("accuracy {:.2f}% ({} rows), cross-entropy {:.4g}", 100.0 * m.accuracy, m.rows, m.cross_entropy);
    std::string rmse, mae;
    for (std::size_t i = 0; i < m.rmse.size(); ++i) {
        rmse += fmt::format("{}{}.{} {:.4g}", i ? ", " : "", model.output_name, i, m.rmse[i]);
        mae += fmt::format("{}{}.{} {:.4g}", i ? ", " : "", model.output_name, i, m.mae[i]);
    }
    return fmt::format("RMSE {:.4g} over {} rows ({}); MAE {}", m.score, m.rows, rmse, mae);
}

}  // namespace meander
