#include "deviation.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>

#include "../runtime/evaluate.hpp"

namespace meander {

bool StorageDeviation::any_integer() const {
    for (const Layer& l : layers)
        if (l.storage != WeightStorage::real) return true;
    return false;
}

StorageDeviation measure_storage_deviation(const Model& quantised, const Model& real, const std::vector<StorageNote>& notes,
                                           Precision p, const std::vector<std::vector<double>>& inputs,
                                           const std::optional<Labels>& labels) {
    std::vector<EvalResult> q, f;
    for (const auto& row : inputs) {
        const Eigen::Map<const Eigen::VectorXd> x(row.data(), static_cast<Eigen::Index>(row.size()));
        q.push_back(evaluate(quantised, x));
        f.push_back(evaluate(real, x));
    }
    return storage_deviation_of(quantised, notes, p, q, f, labels);
}

StorageDeviation storage_deviation_of(const Model& quantised, const std::vector<StorageNote>& notes, Precision p,
                                      const std::vector<EvalResult>& quantised_results,
                                      const std::vector<EvalResult>& real_results, const std::optional<Labels>& labels) {
    StorageDeviation d;
    for_each_model_dense(quantised, [&](const Dense& l) {
        StorageDeviation::Layer row;
        row.name = l.name;
        row.storage = l.storage;
        row.weights = dense_macs(l);
        row.bytes = weight_table_bytes(l, l.storage, p);
        row.real_bytes = weight_table_bytes(l, WeightStorage::real, p);
        for (const StorageNote& n : notes)
            if (n.layer == &l) row.note += (row.note.empty() ? "" : "; ") + n.text;
        d.layers.push_back(row);
    });
    const auto n = static_cast<std::size_t>(quantised.output_size);
    d.max_abs.assign(n, 0.0);
    d.max_rel.assign(n, 0.0);
    d.max_abs_row.assign(n, 0);
    std::vector<Eigen::VectorXd> out_q, out_f;
    Labels kept;
    if (labels) kept.path = labels->path;
    for (std::size_t r = 0; r < quantised_results.size() && r < real_results.size(); ++r) {
        const EvalResult& q = quantised_results[r];
        const EvalResult& f = real_results[r];
        if (q.status != EvalStatus::ok || f.status != EvalStatus::ok) {
            ++d.failed_rows;
            continue;
        }
        ++d.rows;
        for (std::size_t i = 0; i < n; ++i) {
            const double qi = q.output[static_cast<Eigen::Index>(i)], fi = f.output[static_cast<Eigen::Index>(i)];
            const double dev = std::fabs(qi - fi);
            if (dev > d.max_abs[i]) d.max_abs[i] = dev, d.max_abs_row[i] = static_cast<int>(r);
            d.max_rel[i] = std::max(d.max_rel[i], dev / std::max(1.0, std::fabs(fi)));
        }
        out_q.push_back(q.output);
        out_f.push_back(f.output);
        if (labels) kept.rows.push_back(labels->rows[r]);
    }
    if (labels && d.rows > 0) {
        const bool cls = is_classifier(quantised);
        d.metric_real = task_metric(cls, out_f, kept);
        d.metric_quantised = task_metric(cls, out_q, kept);
    }
    return d;
}

std::string render_storage_deviation(const StorageDeviation& d, const Model& model) {
    std::string s = "\nweight storage (the quantised model against the same model with real weights, both in eval)\n";
    long bytes = 0, real_bytes = 0;
    for (const StorageDeviation::Layer& l : d.layers) {
        bytes += l.bytes;
        real_bytes += l.real_bytes;
        s += fmt::format("  {:<16} {:<6} {:>7} weights {:>8} B (as reals {} B){}\n", l.name, weight_storage_name(l.storage),
                         l.weights, l.bytes, l.real_bytes, l.note.empty() ? "" : "; " + l.note);
    }
    s += fmt::format("  weights and scales {} B, as reals {} B: {} B saved ({:.1f}%)\n", bytes, real_bytes, real_bytes - bytes,
                     real_bytes > 0 ? 100.0 * static_cast<double>(real_bytes - bytes) / static_cast<double>(real_bytes) : 0.0);
    s += fmt::format("  rows {}{}\n", d.rows, d.failed_rows ? fmt::format(" ({} did not evaluate in one of the two)", d.failed_rows) : "");
    for (std::size_t i = 0; i < d.max_abs.size(); ++i)
        s += fmt::format("  {}.{:<4} largest deviation {:.3g} (row {}), scaled {:.3g} (|q - f| / max(1, |f|))\n",
                         model.output_name, i, d.max_abs[i], d.max_abs_row[i] + 1, d.max_rel[i]);
    if (d.metric_real && d.metric_quantised)
        s += fmt::format("  task metric          real weights: {}\n                       quantised:    {}\n",
                         metric_text(*d.metric_real, model), metric_text(*d.metric_quantised, model));
    return s;
}

}  // namespace meander
