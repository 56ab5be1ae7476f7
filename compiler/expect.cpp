// Expect: the reference evaluation against the training framework's outputs,
// and the export mistakes that explain a disagreement. See expect.hpp.
#include "expect.hpp"

#include <fmt/format.h>

#include <cmath>
#include <functional>
#include <limits>
#include <optional>

#include "../runtime/evaluate.hpp"
#include "expect_mistakes.hpp"
#include "format.hpp"
#include "sequence.hpp"

namespace meander {

namespace {

// The rows to evaluate: input vectors, or a streaming model's observations.
struct Rows {
    std::vector<Eigen::VectorXd> plain;
    std::vector<SequenceRow> sequence;
    std::size_t size() const { return plain.empty() ? sequence.size() : plain.size(); }
};

std::vector<EvalResult> run_model(const Model& m, const Rows& rows) {
    if (m.stream) return evaluate_sequences(m, rows.sequence);
    std::vector<EvalResult> out;
    out.reserve(rows.plain.size());
    for (const auto& x : rows.plain) out.push_back(evaluate(m, x));
    return out;
}

// The largest |got - want| / max(1, |want|), where; a row that does not evaluate
// or a NaN makes it infinite.
struct Deviation {
    double worst = 0.0;
    std::size_t row = 0;
    int output = 0;
    std::optional<std::size_t> failed_row;   // the first row that did not evaluate
    std::string failed_status;
};

Deviation deviation(const std::vector<EvalResult>& got, const std::vector<std::vector<double>>& want) {
    Deviation d;
    for (std::size_t r = 0; r < got.size(); ++r) {
        if (got[r].status != EvalStatus::ok) {
            if (!d.failed_row) {
                d.failed_row = r;
                d.failed_status = eval_status_name(got[r].status);
            }
            d.worst = std::numeric_limits<double>::infinity();
            continue;
        }
        for (std::size_t i = 0; i < want[r].size(); ++i) {
            const double g = got[r].output[static_cast<Eigen::Index>(i)];
            double q = std::fabs(g - want[r][i]) / std::max(1.0, std::fabs(want[r][i]));
            if (std::isnan(q)) q = std::numeric_limits<double>::infinity();
            if (q > d.worst || (r == 0 && i == 0)) {
                if (q > d.worst) d.worst = q;
                d.row = r;
                d.output = static_cast<int>(i);
            }
        }
    }
    return d;
}

// Every dense layer of `m`, in description order (for_each_model_dense), writable.
std::vector<Dense*> dense_layers(Model& m) {
    std::vector<Dense*> out;
    for_each_model_dense(m, [&](const Dense& d) { out.push_back(const_cast<Dense*>(&d)); });  // m itself is not const
    return out;
}

// The weight read as stored (in, out): the bound matrix transposed (square only).
void transpose_weight(Dense& d) { d.weight = Eigen::MatrixXd(d.weight.transpose()); }

// The time column first in the file, read as last: the columns rotated. `to_last`
// moves column 0 to the end (undoing a missing `time-first`); otherwise the last
// column goes first (undoing a `time-first` that should not be there).
void rotate_time(Dense& d, bool to_last) {
    const Eigen::Index n = d.weight.cols();
    Eigen::MatrixXd w(d.weight.rows(), n);
    if (to_last) {
        w.leftCols(n - 1) = d.weight.rightCols(n - 1);
        w.col(n - 1) = d.weight.col(0);
    } else {
        w.col(0) = d.weight.col(n - 1);
        w.rightCols(n - 1) = d.weight.leftCols(n - 1);
    }
    d.weight = w;
}

std::vector<Mistake> usual_mistakes(const Model& model, const std::vector<Tensor>& loose) {
    Model probe = model;
    const std::vector<Dense*> layers = dense_layers(probe);
    std::vector<Mistake> out;
    std::vector<int> square, timed;
    for (int i = 0; i < static_cast<int>(layers.size()); ++i) {
        const Dense& d = *layers[static_cast<std::size_t>(i)];
        if (d.out == d.in_total() && d.weight.rows() == d.out && d.weight.cols() == d.out) square.push_back(i);
        if (d.time_input && d.weight.cols() == d.in_total()) timed.push_back(i);
    }
    auto transposed_advice = [&](int i) {
        const Dense& d = *layers[static_cast<std::size_t>(i)];
        return d.transposed ? fmt::format("layer '{}': its weight '{}' is stored (out, in), as PyTorch's Linear does: drop "
                                          "'transposed' (from the layer or its block's 'layout')",
                                          d.name, d.weight_tensor)
                            : fmt::format("layer '{}': its weight '{}' is stored (in, out) (y = x @ W + b): add ', transposed' "
                                          "to the layer",
                                          d.name, d.weight_tensor);
    };
    auto time_advice = [&](int i) {
        const Dense& d = *layers[static_cast<std::size_t>(i)];
        return d.time_first ? fmt::format("layer '{}': the time column of '{}' is its last: drop 'time-first' (from the "
                                          "layer or its block's 'layout')",
                                          d.name, d.weight_tensor)
                            : fmt::format("layer '{}': the time column of '{}' is its first: add ', time-first' to the layer",
                                          d.name, d.weight_tensor);
    };
    auto transpose_all = [](const std::vector<int>& which) {
        return [which](Model& m) {
            const auto ls = dense_layers(m);
            for (int i : which) transpose_weight(*ls[static_cast<std::size_t>(i)]);
        };
    };
    auto rotate_all = [](const std::vector<int>& which) {
        return [which](Model& m) {
            const auto ls = dense_layers(m);
            for (int i : which) {
                Dense& d = *ls[static_cast<std::size_t>(i)];
                rotate_time(d, !d.time_first);
            }
        };
    };
    for (int i : square)
        out.push_back({fmt::format("the square weight of layer '{}' {}", layers[static_cast<std::size_t>(i)]->name,
                                   layers[static_cast<std::size_t>(i)]->transposed ? "read as (in, out)" : "transposed"),
                       {{layers[static_cast<std::size_t>(i)]->loc, transposed_advice(i)}}, transpose_all({i})});
    if (square.size() > 1) {
        Mistake all{fmt::format("all {} square weights transposed", square.size()), {}, transpose_all(square)};
        for (int i : square) all.advice.emplace_back(layers[static_cast<std::size_t>(i)]->loc, transposed_advice(i));
        out.push_back(std::move(all));
    }
    for (int i : timed)
        out.push_back({fmt::format("the time column of layer '{}' {}", layers[static_cast<std::size_t>(i)]->name,
                                   layers[static_cast<std::size_t>(i)]->time_first ? "last" : "first"),
                       {{layers[static_cast<std::size_t>(i)]->loc, time_advice(i)}}, rotate_all({i})});
    if (timed.size() > 1) {
        Mistake all{fmt::format("the time column first in all {} layers with '+ t'", timed.size()), {}, rotate_all(timed)};
        for (int i : timed) all.advice.emplace_back(layers[static_cast<std::size_t>(i)]->loc, time_advice(i));
        out.push_back(std::move(all));
    }
    // The head: the model's last layer, when it is a dense one.
    if (!model.blocks.empty() && model.blocks.back().kind == Block::Kind::dense) {
        const Dense& head = model.blocks.back().dense;
        if (head.act == Activation::softmax)
            out.push_back({"logits written instead of probabilities",
                           {{head.loc, fmt::format("layer '{}': the expected file holds its values before the softmax (logits): "
                                             "write the probabilities from the trainer (torch.softmax(logits, -1)), or drop "
                                             "'softmax' from the layer if the deployed model is to give logits",
                                             head.name)}},
                           [](Model& m) { m.blocks.back().dense.act = Activation::identity; }, -1});
        else if (head.act == Activation::identity)
            out.push_back({"probabilities written where the description gives logits",
                           {{head.loc, fmt::format("layer '{}': the expected file holds probabilities: add ', softmax' to the "
                                             "layer (or write the logits from the trainer)",
                                             head.name)}},
                           [](Model& m) { m.blocks.back().dense.act = Activation::softmax; }, -1});
    }
    for (Mistake& m : standardisation_mistakes(model, loose)) out.push_back(std::move(m));
    return out;
}

// The shape of a CSV of numbers: data rows and the fields of the first one (a
// first line that is not all numbers is a header).
struct CsvShape {
    std::size_t rows = 0;
    std::size_t columns = 0;
    std::string first_line;
};

CsvShape csv_shape(const std::string& text) {
    CsvShape s;
    std::size_t pos = 0;
    bool first = true;
    while (pos < text.size()) {
        std::size_t end = text.find('\n', pos);
        if (end == std::string::npos) end = text.size();
        const std::string_view line(text.data() + pos, end - pos);
        pos = end + 1;
        if (line.find_first_not_of(" \t\r") == std::string_view::npos) continue;
        std::vector<std::string_view> fields;
        for (std::size_t b = 0;;) {
            const std::size_t c = line.find(',', b);
            fields.push_back(line.substr(b, c == std::string_view::npos ? std::string_view::npos : c - b));
            if (c == std::string_view::npos) break;
            b = c + 1;
        }
        if (first) {
            first = false;
            bool numbers = true;
            double v = 0;
            for (auto f : fields) numbers = numbers && parse_number(f, v);
            if (!numbers) continue;  // a header
        }
        if (s.rows == 0) {
            s.columns = fields.size();
            s.first_line = std::string(line);
        }
        ++s.rows;
    }
    return s;
}

std::string plural(std::size_t n, const char* one, const char* many) {
    return fmt::format("{} {}", n, n == 1 ? one : many);
}

}  // namespace

bool check_expected(const LoadedModel& loaded, const std::string& input_path, const std::string& expect_path,
                    double tolerance, Diagnostics& diags, std::string& summary) {
    const Model& model = loaded.model;
    Rows rows;
    if (model.stream) {
        auto seq = read_sequence_file(input_path, model.input_size, model.stream->largest_gap, diags, false, model.input_name,
                                      &model.input_info);
        if (!seq) return false;
        rows.sequence = std::move(*seq);
    } else {
        auto plain = read_csv_rows(input_path, model.input_size, diags, false, nullptr, model.input_name, &model.input_info);
        if (!plain) return false;
        for (const auto& r : *plain)
            rows.plain.push_back(Eigen::Map<const Eigen::VectorXd>(r.data(), static_cast<Eigen::Index>(r.size())));
    }
    // The shape first, so a file of another shape is named as such (not as 40 rows
    // with a wrong column count).
    auto expect_src = load_source(expect_path, diags);
    if (!expect_src) return false;
    const CsvShape shape = csv_shape(expect_src->text);
    const std::size_t n = rows.size(), width = static_cast<std::size_t>(model.output_size);
    const bool separator = shape.columns != width && !csv_separator_problem(shape.first_line, width).empty();
    if (!separator && (shape.rows != n || shape.columns != width)) {
        diags.error(expect_path,
                    fmt::format("holds {} of {}; the model gives {} of {} for the {} of {} (one row of outputs per "
                                "input row, in the same order)",
                                plural(shape.rows, "row", "rows"), plural(shape.columns, "value", "values"),
                                plural(n, "row", "rows"), plural(width, "output", "outputs"),
                                plural(n, "input row", "input rows"), input_path));
        return false;
    }
    std::vector<int> lines;
    auto want = read_csv_rows(expect_path, model.output_size, diags, false, &lines, model.output_name, &model.output_info,
                              "output");
    if (!want) return false;

    const std::vector<EvalResult> got = run_model(model, rows);
    const Deviation dev = deviation(got, *want);
    const auto ok = [&](const Deviation& d) { return !d.failed_row && d.worst <= tolerance; };
    if (ok(dev)) {
        summary = fmt::format("{}: agrees with the reference evaluation: {} rows x {} outputs, largest |meander - expected| / "
                              "max(1, |expected|) {:.3g} (row {}, output {}); tolerance {:g}\n",
                              expect_path, n, width, dev.worst, dev.row + 1, dev.output, tolerance);
        return true;
    }
    if (dev.failed_row) {
        diags.error(expect_path, fmt::format("row {} of {} does not evaluate ({}), so it cannot be compared", *dev.failed_row + 1,
                                             input_path, dev.failed_status));
        return false;
    }
    const std::size_t r = dev.row;
    const auto i = static_cast<Eigen::Index>(dev.output);
    diags.error(*expect_src, Loc{lines[r], 1},
                 fmt::format("the reference evaluation disagrees with the expected outputs: row {}, output {}: meander {}, "
                             "expected {} (|difference| / max(1, |expected|) = {:.3g}, tolerance {:g})",
                             r + 1, dev.output, format_double(got[r].output[i]), format_double((*want)[r][static_cast<std::size_t>(i)]),
                             dev.worst, tolerance));
    // Which usual mistake explains it: each one undone on a copy of the model.
    std::vector<const Mistake*> explain;
    const std::vector<Mistake> mistakes = usual_mistakes(model, loaded.loose_vectors);
    for (const Mistake& m : mistakes) {
        Model probe = model;
        m.undo(probe);
        if (ok(deviation(run_model(probe, rows), *want))) explain.push_back(&m);
    }
    // Two mistakes at once (a Keras export transposes and puts time first): every pair,
    // only when no single one explains it.
    std::vector<std::pair<const Mistake*, const Mistake*>> pairs;
    if (explain.empty())
        for (std::size_t a = 0; a < mistakes.size(); ++a)
            for (std::size_t b = a + 1; b < mistakes.size(); ++b) {
                if (mistakes[a].group >= 0 && mistakes[a].group == mistakes[b].group) continue;  // the same thing twice
                Model probe = model;
                mistakes[a].undo(probe);
                mistakes[b].undo(probe);
                if (ok(deviation(run_model(probe, rows), *want))) pairs.emplace_back(&mistakes[a], &mistakes[b]);
            }
    for (const auto& [a, b] : pairs) {
        diags.report(Severity::note, &loaded.source, Loc{}, fmt::format("they agree with {} and {} together:", a->what, b->what));
        for (const Mistake* m : {a, b})
            for (const auto& [at, advice] : m->advice)
                if (at.line > 0) diags.note(loaded.source, at, advice);
    }
    if (!pairs.empty()) return false;
    if (explain.empty()) {
        std::string tried;
        for (const Mistake& m : mistakes) tried += (tried.empty() ? "" : "; ") + m.what;
        diags.report(Severity::note, &loaded.source, Loc{},
                     mistakes.empty() ? std::string("no usual export mistake applies to this model (no square weight, no "
                                                    "'+ t' layer, no dense head, no standardisation and no loose tensor "
                                                    "of the input's or output's length)")
                                      : fmt::format("none of the usual export mistakes explains it, alone or two together (tried: {})", tried));
        return false;
    }
    for (const Mistake* m : explain) {
        diags.report(Severity::note, &loaded.source, Loc{}, fmt::format("they agree with {}:", m->what));
        for (const auto& [at, advice] : m->advice) {
            if (at.line > 0) diags.note(loaded.source, at, advice);
        }
    }
    return false;
}

}  // namespace meander
