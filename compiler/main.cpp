// The command line: reads the arguments, then calls the stages in a line:
// source -> parse -> check -> weights -> (eval | emit | verify | cost | format).
// tune and refit live in command_tune.cpp and command_refit.cpp, the shared
// pieces in command_support.hpp.
#include <CLI/CLI.hpp>
#include <fmt/format.h>

#include <unistd.h>

#include <atomic>
#include <cmath>
#include <csignal>
#include <cstdio>
#include <functional>
#include <filesystem>

#include "compiler/cost.hpp"
#include "compiler/deviation.hpp"
#include "compiler/diff.hpp"
#include "compiler/dump.hpp"
#include "compiler/emit.hpp"
#include "compiler/expect.hpp"
#include "compiler/format.hpp"
#include "compiler/labels.hpp"
#include "compiler/learn.hpp"
#include "compiler/learn_cost.hpp"
#include "compiler/load.hpp"
#include "compiler/lower.hpp"
#include "compiler/parse.hpp"
#include "compiler/plot.hpp"
#include "compiler/check.hpp"
#include "compiler/command_support.hpp"
#include "compiler/refit.hpp"
#include "compiler/sequence.hpp"
#include "compiler/spelling.hpp"
#include "compiler/stream_cost.hpp"
#include "compiler/source.hpp"
#include "compiler/tensors.hpp"
#include "compiler/weights.hpp"
#include "compiler/tune.hpp"
#include "compiler/verify.hpp"
#include "runtime/evaluate.hpp"
#include "runtime/tableau.hpp"

namespace fs = std::filesystem;
using namespace meander;

namespace {

using namespace meander::cli;

// A finite number above (or at) zero. CLI11's own range checks let NaN
// through and print their range with 300 digits.
CLI::Validator finite_number(bool zero_allowed) {
    return CLI::Validator(
        [zero_allowed](std::string& text) -> std::string {
            double v = 0;
            try {
                v = std::stod(text);
            } catch (const std::exception&) {
                return "expected a number, not '" + text + "'";
            }
            if (!std::isfinite(v) || v < 0 || (v == 0 && !zero_allowed))
                return std::string("expected a finite number ") + (zero_allowed ? "at or above" : "above") + " 0, not " +
                       text;
            return {};
        },
        zero_allowed ? "NUMBER >= 0" : "NUMBER > 0");
}
const CLI::Validator kFinitePositive = finite_number(false);
const CLI::Validator kFiniteNonNegative = finite_number(true);
// An output path: an empty one names no file or folder, a usage error.
const CLI::Validator kNonEmptyPath(
    [](std::string& text) -> std::string { return text.empty() ? "expected a path, not an empty name" : ""; }, "PATH");

std::vector<Eigen::VectorXd> to_vectors(const std::vector<std::vector<double>>& rows) {
    std::vector<Eigen::VectorXd> v;
    for (const auto& r : rows) v.push_back(Eigen::Map<const Eigen::VectorXd>(r.data(), static_cast<Eigen::Index>(r.size())));
    return v;
}

std::string csv_header(const Model& m) {
    std::string h;
    // The values' names (or "output.i"), a unit in parentheses after its name.
    for (int i = 0; i < m.output_size; ++i) {
        const auto k = static_cast<std::size_t>(i);
        const std::string unit = k < m.output_info.units.size() ? m.output_info.units[k] : std::string();
        h += fmt::format("{}{}{}", i ? "," : "", value_name(m.output_info, m.output_name, i),
                         unit.empty() ? "" : " (" + unit + ")");
    }
    return h + "\n";
}

// A weights file's tensors; given a description, its weights and which tensors its layers bind.
int cmd_tensors(const std::string& file, const std::string& under) {
    Diagnostics diags;
    const bool description = fs::path(file).extension() == ".mnd";
    std::optional<LoadedModel> loaded;
    std::string weights = file, key = under;
    if (description) {
        loaded = load_model(file, Precision::float64, diags, false);
        if (!loaded) return flush(diags), kModelError;
        if (loaded->model.weights_path.empty()) {
            diags.error(loaded->source, loaded->model.loc, "the description names no weights: add a line 'weights \"FILE\"'");
            return flush(diags), kModelError;
        }
        weights = weights_path_of(loaded->model, file);
        if (key.empty()) key = loaded->model.weights_key;
    }
    auto set = read_weights(weights, diags, key, loaded ? &loaded->model : nullptr);
    if (!set) return flush(diags), kModelError;
    std::vector<std::string> binding;
    if (loaded) {
        Diagnostics bind_diags;  // check names the problems; this lists what binds
        bind_weights(loaded->model, loaded->source, *set, bind_diags, &binding);
    }
    flush(diags);
    std::fputs(render_tensor_table(*set, loaded ? &binding : nullptr).c_str(), stdout);
    return 0;
}

// With `expect`: the reference evaluation over `input` against the training
// framework's outputs for the same rows (compiler/expect.hpp).
int cmd_check(const std::string& model_path, const std::string& precision, const std::string& input,
              const std::string& expect, double tolerance, StorageOverride storage) {
    Diagnostics diags;
    auto loaded = load_model(model_path, precision_of(precision), diags, true, storage);
    if (!loaded) return flush(diags), kModelError;
    report_storage_notes(*loaded, diags);
    std::string summary;
    if (!expect.empty() && !check_expected(*loaded, input, expect, tolerance, diags, summary))
        return flush(diags), kModelError;
    flush(diags);
    std::printf("%s: ok (%s, content %s)\n", model_path.c_str(), loaded->model.name.c_str(), loaded->content_hash.c_str());
    const Model& m = loaded->model;
    if (const std::string v = describe_vector(m.input_info, m.input_name, m.input_size); !v.empty())
        std::printf("  input %s: %s\n", m.input_name.c_str(), v.c_str());
    if (const std::string v = describe_vector(m.output_info, m.output_name, m.output_size); !v.empty())
        std::printf("  output %s: %s\n", m.output_name.c_str(), v.c_str());
    std::fputs(summary.c_str(), stdout);
    return 0;
}

// `keep_going`: a row that does not evaluate gets NaN outputs and its result in the
// last column (`result`: ok, input_not_finite, ...) instead of failing the run.
int cmd_eval(const std::string& model_path, const std::string& input, const std::string& output, bool stats,
             const std::string& labels_path, bool keep_going, StorageOverride storage) {
    Diagnostics diags;
    auto loaded = load_model(model_path, Precision::float64, diags, true, storage);
    if (!loaded) return flush(diags), kModelError;
    const Model& model = loaded->model;
    // One result per row: a row of inputs, or an observation of a sequence file (streaming models).
    std::vector<EvalResult> results;
    std::vector<int> lines;
    if (model.stream) {
        auto rows = read_sequence_file(input, model.input_size, model.stream->largest_gap, diags, false, model.input_name,
                                       &model.input_info);
        if (!rows) return flush(diags), kModelError;
        results = evaluate_sequences(model, *rows);
        for (const auto& r : *rows) lines.push_back(r.line);
    } else {
        auto rows = read_csv_rows(input, model.input_size, diags, false, &lines, model.input_name, &model.input_info);
        if (!rows) return flush(diags), kModelError;
        for (const auto& x : to_vectors(*rows)) results.push_back(evaluate(model, x));
    }
    std::optional<Labels> labels;
    if (!labels_path.empty() && !(labels = read_labels(labels_path, model, results.size(), diags)))
        return flush(diags), kModelError;
    std::vector<Eigen::VectorXd> outputs;
    std::vector<std::size_t> ok_rows;  // 0-based, for the labels of the rows that evaluated
    std::string csv = csv_header(model);
    if (keep_going) csv.insert(csv.size() - 1, ",result");
    std::string stat_text;
    if (stats) stat_text = "row  field_evals  steps_accepted  steps_rejected  h_min  h_max\n";
    int row = 0, failed = 0;
    RowProblems problems;  // one diagnostic per distinct failure, with a count of the rows like it
    for (const EvalResult& r : results) {
        ++row;
        if (r.status != EvalStatus::ok) {
            ++failed;
            const std::string what = fmt::format("the model returns {}{} for this row", eval_status_name(r.status),
                                                 r.block.empty() ? "" : fmt::format(" in block '{}'", r.block));
            if (!keep_going) {
                problems.add(what, Loc{lines[static_cast<std::size_t>(row - 1)], 1}, what);
                continue;
            }
            for (int i = 0; i < model.output_size; ++i) csv += i ? ",nan" : "nan";
            csv += fmt::format(",{}\n", eval_status_name(r.status));
            continue;
        }
        for (Eigen::Index i = 0; i < r.output.size(); ++i) csv += (i ? "," : "") + format_double(r.output[i]);
        csv += keep_going ? ",ok\n" : "\n";
        outputs.push_back(r.output);
        ok_rows.push_back(static_cast<std::size_t>(row - 1));
        if (stats)
            stat_text += fmt::format("{}  {}  {}  {}  {}  {}\n", row, r.stats.field_evals, r.stats.steps_accepted,
                                     r.stats.steps_rejected, format_double(r.stats.h_min), format_double(r.stats.h_max));
    }
    if (!problems.empty()) {
        if (auto csv_src = load_source(input, diags)) problems.report(*csv_src, diags);  // read again to show the rows
        else diags.error(input, fmt::format("{} rows did not evaluate", failed));
    }
    if (!diags.ok()) return flush(diags), kModelError;
    if (failed > 0)
        diags.warning(input, fmt::format("{} of {} rows did not evaluate: their outputs are nan and the result column says why",
                                         failed, row));
    if (labels && failed > 0) {  // the metric over the rows that evaluated
        Labels kept = *labels;
        kept.rows.clear();
        for (std::size_t i : ok_rows) kept.rows.push_back(labels->rows[i]);
        labels = std::move(kept);
    }
    if (output.empty()) {
        std::fputs(csv.c_str(), stdout);
    } else if (!write_file_atomic(output, csv, diags)) {
        return flush(diags), kModelError;
    }
    flush(diags);
    if (stats) std::fputs(stat_text.c_str(), stderr);
    if (labels)  // beside the CSV, not in it
        std::fprintf(stderr, "%s: %s\n", labels_path.c_str(),
                     metric_text(task_metric(is_classifier(model), outputs, *labels), model).c_str());
    return 0;
}

EmitOptions emit_options(const LoadedModel& l, Precision p, bool c_header) {
    EmitOptions o;
    o.precision = p;
    o.c_header = c_header;
    o.content_hash = l.content_hash;
    o.meander_version = MEANDER_VERSION;
    return o;
}

// What learns on the device: --learn overrides the description's `learn` statement,
// --learn-by its way. Sets opts.learn; returns an exit status (0: fine).
int resolve_learning(const LoadedModel& loaded, const std::string& model_path, const std::string& learn,
                     const std::string& learn_by, EmitOptions& opts, Diagnostics& diags) {
    std::optional<LearnSpec> spec = loaded.model.learn;
    const bool from_option = !learn.empty();
    if (from_option) {
        spec = learn_spec_from_option(learn, learn_by, diags);
        if (!spec) return kUsageError;
    } else if (!learn_by.empty()) {
        if (!spec) {
            diags.error("--learn-by", "needs --learn or a `learn` statement in the description");
            return kUsageError;
        }
        auto way = learn_spec_from_option("all", learn_by, diags);
        if (!way) return kUsageError;
        spec->way = way->way;
        spec->way_written = true;
        spec->way_loc = Loc{};
    }
    if (!spec) return 0;
    // The learning code reads every layer's weights as reals (compiler/emit/learn.cpp).
    bool integers = false;
    for_each_model_dense(loaded.model, [&](const Dense& d) { integers = integers || d.storage != WeightStorage::real; });
    if (integers) {
        diags.error(from_option ? std::string("--learn") : model_path,
                    "learning on the device needs real weights: store every layer as float (weights-as float), "
                    "or learn nothing (integer weights and learning do not combine yet)");
        return kModelError;
    }
    opts.learn = plan_learning(loaded.model, *spec, from_option ? nullptr : &loaded.source,
                               from_option ? std::string("--learn") : model_path, diags);
    return opts.learn ? 0 : kModelError;
}

// The learning figures `cost` adds (the static counts of compiler/emit/learn.cpp).
std::string render_learn_cost(const Model& model, const EmitOptions& opts, const LearnCycles& cycles, bool json) {
    const LearnFigures f = learn_figures(model, opts);
    const std::size_t r = opts.precision == Precision::float32 ? 4 : 8;
    const char* way = learn_way_name(opts.learn->way);
    if (json)
        return fmt::format("\"learning\": {{\"way\": \"{}\", \"learnable_values\": {}, \"parameter_bytes\": {}, "
                           "\"workspace_reals\": {}, \"workspace_bytes\": {}, \"gradient_bytes\": {}, "
                           "\"field_evals_per_step\": {}, \"macs_per_step\": {}, \"workspace_grows_with_steps\": {}, "
                           "{}}}",
                           way, f.learnable_count, f.learnable_count * r, f.workspace_size, f.workspace_size * r,
                           f.learnable_count * r, f.field_evals, f.macs,
                           f.through_continuous && opts.learn->way == LearnSpec::Way::steps ? "true" : "false",
                           render_learn_cycles_json(cycles));
    std::string o = fmt::format("\nlearning on the device (by {})\n", way);
    o += fmt::format("  learnable values        {} ({} bytes of RAM in the parameter block)\n", f.learnable_count,
                     f.learnable_count * r);
    o += fmt::format("  learning workspace      {} reals ({} bytes of RAM{})\n", f.workspace_size, f.workspace_size * r,
                     !f.through_continuous ? ""
                     : opts.learn->way == LearnSpec::Way::steps
                         ? "; grows with the step count: the state at every step is kept"
                         : "; independent of the step count");
    o += fmt::format("  gradient                {} bytes (learn_context::grad, for learn_step)\n", f.learnable_count * r);
    o += fmt::format("  field evaluations       {} per learning step (forward and back)\n", f.field_evals);
    o += fmt::format("  MACs                    {} per learning step (dense layers, forward and back)\n", f.macs);
    if (f.through_continuous && opts.learn->way == LearnSpec::Way::adjoint)
        o += "  gradient error          the adjoint's: it shrinks at the method's order as the step count grows\n";
    o += render_learn_cycles_text(cycles);
    return o;
}

int cmd_compile(const std::string& model_path, const std::string& outdir, const std::string& precision, bool c_header,
                const std::string& self_test, const std::string& dump, const std::string& learn,
                const std::string& learn_by, StorageOverride storage) {
    Diagnostics diags;
    Precision p = precision_of(precision);
    auto loaded = load_model(model_path, p, diags, true, storage);
    if (!loaded) return flush(diags), kModelError;
    report_storage_notes(*loaded, diags);
    EmitOptions opts = emit_options(*loaded, p, c_header);
    if (const int status = resolve_learning(*loaded, model_path, learn, learn_by, opts, diags); status != 0)
        return flush(diags), status;
    if (!self_test.empty() && loaded->model.stream) {
        // A sequence file: each golden observation keeps its gap and where its sequence begins.
        auto rows = read_sequence_file(self_test, loaded->model.input_size, loaded->model.stream->largest_gap, diags,
                                       p == Precision::float32, loaded->model.input_name, &loaded->model.input_info);
        if (!rows) return flush(diags), kModelError;
        const std::vector<EvalResult> results = evaluate_sequences(loaded->model, *rows);
        for (std::size_t i = 0; i < rows->size(); ++i) {
            const SequenceRow& row = (*rows)[i];
            if (results[i].status != EvalStatus::ok) {
                diags.error(self_test, fmt::format("line {}: {} in the reference evaluation; a golden observation must evaluate",
                                                   row.line, eval_status_name(results[i].status)));
                continue;
            }
            opts.self_test_inputs.push_back(row.values);
            opts.self_test_outputs.emplace_back(results[i].output.data(), results[i].output.data() + results[i].output.size());
            opts.self_test_gaps.push_back(row.gap);
            opts.self_test_first.push_back(row.first);
        }
        if (!diags.ok()) return flush(diags), kModelError;
    } else if (!self_test.empty()) {
        auto rows = read_csv_rows(self_test, loaded->model.input_size, diags, p == Precision::float32, nullptr,
                                  loaded->model.input_name, &loaded->model.input_info);
        if (!rows) return flush(diags), kModelError;
        int row = 0;
        for (const auto& in : to_vectors(*rows)) {
            ++row;
            EvalResult r = evaluate(loaded->model, in);
            if (r.status != EvalStatus::ok) {
                diags.error(self_test, fmt::format("row {}: {} in the reference evaluation; a golden vector must evaluate",
                                                   row, eval_status_name(r.status)));
                continue;
            }
            opts.self_test_inputs.emplace_back(in.data(), in.data() + in.size());
            opts.self_test_outputs.emplace_back(r.output.data(), r.output.data() + r.output.size());
        }
        if (!diags.ok()) return flush(diags), kModelError;
    }
    if (dump == "parse") std::fputs(dump_model(loaded->model).c_str(), stdout);
    if (dump == "lower") std::fputs(dump_lowered(lower_model(loaded->model, p)).c_str(), stdout);
    auto files = loaded->model.stream ? emit_stream(loaded->model, opts) : emit_model(loaded->model, opts);
    if (dump == "emit")
        for (const auto& f : files) std::fputs(fmt::format("// ---- {}\n{}", f.name, f.text).c_str(), stdout);
    std::error_code ec;
    // The folders this compile creates, deepest last: a failed write removes them again.
    std::vector<fs::path> created;
    for (fs::path dir = fs::path(outdir).lexically_normal(); !dir.empty() && !fs::exists(dir, ec); dir = dir.parent_path()) {
        created.insert(created.begin(), dir);
        if (dir == dir.parent_path()) break;
    }
    fs::create_directories(outdir, ec);
    if (ec) {
        diags.error(outdir, fmt::format("cannot create folder: {}", ec.message()));
        return flush(diags), kModelError;
    }
    std::vector<std::pair<std::string, std::string>> out;
    for (const auto& f : files) out.emplace_back((fs::path(outdir) / f.name).string(), f.text);
    if (!write_files_atomic(out, diags)) {
        for (auto it = created.rbegin(); it != created.rend(); ++it) fs::remove(*it, ec);  // only empty ones go
        return flush(diags), kModelError;
    }
    if (self_test.empty()) {
        // A self-test left by an earlier compile would test other code and still build.
        for (const char* suffix : {"_selftest.hpp", "_selftest.cpp"}) {
            const fs::path stale = fs::path(outdir) / (loaded->model.name + suffix);
            if (fs::exists(stale, ec) && fs::remove(stale, ec))
                diags.warning(stale.string(), "removed: a self-test from an earlier compile, whose golden vectors "
                                              "belong to other code (compile with --self-test to make a new one)");
        }
    }
    flush(diags);
    return 0;
}

// The emitted code built for each `--board` and run on its emulator: values against eval
// (the tolerance rule, or equal bits in float64) and output bits against the host build.
int verify_on_boards(const std::vector<std::string>& boards, const VerifyReport& host, Precision p, bool show,
                     const std::function<std::optional<VerifyReport>(const VerifyOptions&, Diagnostics&)>& run,
                     const VerifyOptions& vo) {
    int status = host.passed() ? 0 : kModelError;
    for (const std::string& b : boards) {
        Diagnostics bd;
        VerifyOptions o = vo;
        o.board = b;
        if (!vo.keep_dir.empty()) o.keep_dir = vo.keep_dir + "/" + b;
        auto rep = run(o, bd);
        flush(bd);
        std::printf("\non %s:\n", b.c_str());
        if (!rep) {
            status = kModelError;
            continue;
        }
        if (show) std::fputs(render_verify_rows(*rep).c_str(), stdout);
        std::fputs(render_verify(*rep, p).c_str(), stdout);
        int row = -1, col = -1;
        const int differ = differing_outputs(host, *rep, row, col);
        const int total = rep->compared_rows * rep->outputs;
        if (differ == 0)
            std::printf("bits                 every output equal to the host build's\n");
        else
            std::printf("bits                 %d of %d outputs differ from the host build's (first: row %d, output %d)\n",
                        differ, total, row + 1, col);
        if (!rep->passed() || differ != 0) status = kModelError;
    }
    return status;
}

int cmd_verify(const std::string& model_path, const std::string& input, const std::string& precision, double tol,
               const std::string& cxx, const std::string& keep, bool show, const std::vector<std::string>& boards,
               StorageOverride storage, const std::string& labels_path) {
    Diagnostics diags;
    Precision p = precision_of(precision);
    VerifyOptions vo;
    vo.tolerance = tol;
    vo.cxx = cxx;
    vo.keep_dir = keep;
    {
        // A streaming model: its emitted observe() over a sequence file.
        // (Any other model is loaded again below, with its rows; these diagnostics are then dropped.)
        Diagnostics sd;
        auto loaded = load_model(model_path, p, sd, true, storage);
        if (loaded && loaded->model.stream) {
            auto rows = read_sequence_file(input, loaded->model.input_size, loaded->model.stream->largest_gap, sd,
                                           p == Precision::float32, loaded->model.input_name, &loaded->model.input_info);
            if (!rows) return flush(sd), kModelError;
            report_storage_notes(*loaded, sd);
            std::optional<StorageDeviation> deviation;
            if (measure_storage_deviation(loaded->model, loaded->model, loaded->storage_notes, p, {}, {}).any_integer()) {
                auto real = load_model(model_path, p, sd, true, WeightStorage::real);
                if (!real) return flush(sd), kModelError;
                std::optional<Labels> labels;
                if (!labels_path.empty() && !(labels = read_labels(labels_path, loaded->model, rows->size(), sd)))
                    return flush(sd), kModelError;
                deviation = storage_deviation_of(loaded->model, loaded->storage_notes, p,
                                                 evaluate_sequences(loaded->model, *rows),
                                                 evaluate_sequences(real->model, *rows), labels);
            }
            auto rep = verify_stream(loaded->model, emit_options(*loaded, p, false), *rows, vo, sd);
            flush(sd);
            if (!rep) return kModelError;
            if (show) std::fputs(render_verify_rows(*rep).c_str(), stdout);
            std::fputs(render_verify(*rep, p).c_str(), stdout);
            if (deviation) std::fputs(render_storage_deviation(*deviation, loaded->model).c_str(), stdout);
            return verify_on_boards(boards, *rep, p, show, [&](const VerifyOptions& o, Diagnostics& d) {
                return verify_stream(loaded->model, emit_options(*loaded, p, false), *rows, o, d);
            }, vo);
        }
    }
    auto in = load_with_rows(model_path, p, input, diags, "verify", p == Precision::float32, storage);
    if (!in) return flush(diags), kModelError;
    report_storage_notes(in->loaded, diags);
    std::optional<Labels> labels;
    if (!labels_path.empty() && !(labels = read_labels(labels_path, in->loaded.model, in->rows.size(), diags)))
        return flush(diags), kModelError;
    // Integer weights: what they cost against the same model with real weights, both in eval.
    std::optional<StorageDeviation> deviation;
    {
        StorageDeviation layers = measure_storage_deviation(in->loaded.model, in->loaded.model, in->loaded.storage_notes, p, {}, {});
        if (layers.any_integer()) {
            auto real = load_model(model_path, p, diags, true, WeightStorage::real);
            if (!real) return flush(diags), kModelError;
            deviation = measure_storage_deviation(in->loaded.model, real->model, in->loaded.storage_notes, p, in->rows, labels);
        } else if (labels) {
            diags.warning(labels_path, "the labels serve the weight storage report, and every layer's weights are real here "
                                       "(ask for integers with weights-as or --weights-as)");
        }
    }
    auto rep = verify_model(in->loaded.model, emit_options(in->loaded, p, false), in->rows, vo, diags);
    flush(diags);
    if (!rep) return kModelError;
    if (show) std::fputs(render_verify_rows(*rep).c_str(), stdout);
    std::fputs(render_verify(*rep, p).c_str(), stdout);
    if (deviation) std::fputs(render_storage_deviation(*deviation, in->loaded.model).c_str(), stdout);
    return verify_on_boards(boards, *rep, p, show, [&](const VerifyOptions& o, Diagnostics& d) {
        return verify_model(in->loaded.model, emit_options(in->loaded, p, false), in->rows, o, d);
    }, vo);
}

int cmd_cost(const std::string& model_path, const std::string& input, const std::string& precision,
             const std::string& core, double cycles_per_mac, bool json, bool estimate_only, const std::string& learn,
             const std::string& learn_by, const std::string& labels_path, StorageOverride storage) {
    Diagnostics diags;
    Precision p = precision_of(precision);
    auto loaded = load_model(model_path, p, diags, true, storage);
    if (!loaded) return flush(diags), kModelError;
    CostOptions co;
    co.precision = p;
    co.core = core;
    co.cycles_per_mac = cycles_per_mac;
    co.measure_cycles = !estimate_only;
    if (loaded->model.stream) {
        if (!learn.empty() || loaded->model.learn) {
            diags.error(model_path, "learning on the device is not emitted for streaming models yet");
            return flush(diags), kModelError;
        }
        // Per observation: the worst case at the largest gap, and the spread over a sequence file.
        std::vector<SequenceRow> rows;
        if (!input.empty()) {
            auto read = read_sequence_file(input, loaded->model.input_size, loaded->model.stream->largest_gap, diags, false,
                                           loaded->model.input_name, &loaded->model.input_info);
            if (!read) return flush(diags), kModelError;
            rows = std::move(*read);
        }
        auto rep = measure_stream_cost(loaded->model, rows, co, diags);
        flush(diags);
        if (!rep) return kModelError;
        std::fputs((json ? render_stream_cost_json(*rep) : render_stream_cost_text(*rep)).c_str(), stdout);
        return 0;
    }
    if (!input.empty()) {
        auto rows = read_csv_rows(input, loaded->model.input_size, diags, false, nullptr, loaded->model.input_name,
                                  &loaded->model.input_info);
        if (!rows) return flush(diags), kModelError;
        co.inputs = *rows;
    }
    co.emit = emit_options(*loaded, p, false);
    EmitOptions learning = co.emit;
    if (const int status = resolve_learning(*loaded, model_path, learn, learn_by, learning, diags); status != 0)
        return flush(diags), status;
    std::optional<Labels> labels;
    if (!labels_path.empty()) {
        if (!learning.learn) {
            diags.error("--labels", "gives the targets of the measured learning steps: it needs --learn or a `learn` "
                                    "statement in the description");
            return flush(diags), kUsageError;
        }
        if (input.empty()) {
            diags.error("--labels", "needs --input (a label row per input row)");
            return flush(diags), kUsageError;
        }
        if (!(labels = read_labels(labels_path, loaded->model, co.inputs.size(), diags))) return flush(diags), kModelError;
    }
    auto rep = measure_cost(loaded->model, co, diags);
    if (!rep) return flush(diags), kModelError;
    std::string text = json ? render_cost_json(*rep) : render_cost_text(*rep);
    if (learning.learn) {
        const auto cycles = measure_learn_cycles(loaded->model, learning, co.inputs, labels, co, diags);
        if (!cycles) return flush(diags), kModelError;
        if (json) {
            const std::size_t close = text.rfind('}');
            text.insert(close, ",\n  " + render_learn_cost(loaded->model, learning, *cycles, true) + "\n");
        } else {
            text += render_learn_cost(loaded->model, learning, *cycles, false);
        }
    }
    flush(diags);
    std::fputs(text.c_str(), stdout);
    return 0;
}

// Exit status as the diff tool's: 0 the same, 1 different, 2 trouble (a model
// that does not load), so that scripts can tell a change from a failure.
int cmd_diff(const std::string& a_path, const std::string& b_path, double tolerance, bool json) {
    Diagnostics diags;
    auto a = load_model(a_path, Precision::float32, diags);
    auto b = load_model(b_path, Precision::float32, diags);
    if (!a || !b) return flush(diags), kDiffTrouble;
    DiffOptions o;
    o.weight_tolerance = tolerance;
    auto d = diff_models(a->model, b->model, o, diags);
    flush(diags);
    if (!d) return kDiffTrouble;
    std::fputs((json ? render_diff_json(*d) : render_diff_text(*d)).c_str(), stdout);
    return d->same() ? 0 : kModelError;
}

int cmd_format(const std::string& model_path, bool in_place, bool check_only) {
    Diagnostics diags;
    auto src = load_source(model_path, diags);
    if (!src) return flush(diags), kModelError;
    auto text = format_description(*src, diags);
    if (!text) return flush(diags), kModelError;
    flush(diags);
    if (check_only) {
        if (*text == src->text) return 0;
        std::fprintf(stderr, "%s: not in canonical form (run meander format --in-place)\n", model_path.c_str());
        return kModelError;
    }
    if (in_place) {
        if (*text == src->text) return 0;
        return write_file_atomic(model_path, *text, diags) ? 0 : (flush(diags), kModelError);
    }
    std::fputs(text->c_str(), stdout);
    return 0;
}

}  // namespace

int main(int argc, char** argv) {
    CLI::App app{"meander: compiles networks with continuous-depth blocks into standalone C++ for microcontrollers"};
    app.set_version_flag("--version", std::string("meander ") + MEANDER_VERSION);
    app.require_subcommand(1);

    const std::vector<std::string> precisions{"float32", "float64"};
    std::string model, input, output, outdir, precision = "float32", self_test, dump, cxx, keep, core = "cortex-m4f";
    std::string learn, learn_by;
    std::vector<std::string> boards;
    double tol = -1.0, cycles_per_mac = -1.0;
    bool stats = false, show = false, c_header = false, json = false, in_place = false, check_only = false, estimate_only = false;
    std::string weights_as;
    const auto add_weights_as = [&](CLI::App* sub) {
        sub->add_option("--weights-as", weights_as,
                        "store every dense layer's weights as float, int8 or int16 (one scale per row), whatever the "
                        "description's weights-as says")
            ->check(CLI::IsMember({"float", "int8", "int16"}));
    };

    auto* check = app.add_subcommand("check", "parse the description, check shapes, read and bind the weights");
    check->add_option("model", model, "description (.mnd)")->required();
    check->add_option("--precision", precision, "precision the code will be emitted in")->check(CLI::IsMember(precisions));
    std::string expect;
    double expect_tol = kExpectTolerance;
    auto* check_input = check->add_option("--input", input, "CSV of input rows (a sequence file for a streaming model), with --expect");
    auto* check_expect =
        check->add_option("--expect", expect,
                          "CSV of the outputs the training framework gave for the --input rows: compare with the reference "
                          "evaluation, and name the export mistake that explains a disagreement");
    check_expect->needs(check_input);
    check_input->needs(check_expect);
    check->add_option("--tolerance", expect_tol,
                      fmt::format("with --expect: agree when |meander - expected| <= tolerance * max(1, |expected|) (default {:g})",
                                  kExpectTolerance))
        ->check(kFinitePositive)
        ->needs(check_expect);
    add_weights_as(check);

    auto* eval = app.add_subcommand("eval", "evaluate the model in double precision; CSV in, CSV out");
    eval->add_option("model", model, "description (.mnd)")->required();
    eval->add_option("--input", input, "CSV of input rows")->required();
    eval->add_option("--output", output, "write the CSV here instead of standard output")->check(kNonEmptyPath);
    eval->add_flag("--stats", stats, "print field evaluations, accepted/rejected steps and step sizes per row (stderr)");
    std::string labels_path;
    eval->add_option("--labels", labels_path, "CSV of held-out labels, a row per input row: print the task metric (stderr)");
    bool keep_going = false;
    eval->add_flag("--keep-going", keep_going,
                   "a row that does not evaluate gets nan outputs and its result in a last column, 'result', instead of failing the run");
    add_weights_as(eval);

    auto* compile = app.add_subcommand("compile", "emit standalone C++ for the model");
    compile->add_option("model", model, "description (.mnd)")->required();
    compile->add_option("-o,--output-dir", outdir, "folder for the emitted files")->required()->check(kNonEmptyPath);
    compile->add_option("--precision", precision, "float32 (default) or float64")->check(CLI::IsMember(precisions));
    compile->add_flag("--c-header", c_header,
                      "also emit <model>.h, a plain C header (C99), with extern \"C\" entry points in <model>.cpp");
    compile->add_option("--learn", learn,
                        "what may learn on the device: biases, head, all, or layer names separated by commas "
                        "(overrides the description's `learn`)");
    compile->add_option("--learn-by", learn_by, "how the gradient goes back through continuous blocks: steps or adjoint");
    compile->add_option("--self-test", self_test, "CSV of golden inputs: emit a self-test with eval's outputs for them");
    compile->add_option("--dump", dump, "print an intermediate form: parse, lower, emit")
        ->check(CLI::IsMember({"parse", "lower", "emit"}));
    add_weights_as(compile);

    auto* verify = app.add_subcommand("verify", "build the emitted code with the host compiler and compare it with eval");
    verify->add_option("model", model, "description (.mnd)")->required();
    verify->add_option("--input", input, "CSV of input rows")->required();
    verify->add_option("--precision", precision, "float32 (default) or float64")->check(CLI::IsMember(precisions));
    verify->add_option("--tolerance", tol, "fail when |emitted - eval| > tolerance * max(1, |eval|) (float32, streaming models; "
                       "float64 demands equal bits)")
        ->check(kFinitePositive);
    verify->add_option("--cxx", cxx, "host C++ compiler (default: $CXX, else c++)");
    verify->add_option("--keep", keep, "build in this folder and keep the files");
    verify->add_option("--board", boards,
                       "also build for this target and run it on its emulator (repeatable): cortex-m4f, cortex-m3, "
                       "cortex-m7 (qemu-system-arm MPS2 boards), arm-linux (qemu-arm)")
        ->check(CLI::IsMember(verify_boards()));
    verify->add_flag("--show", show, "print every output beside eval's");
    add_weights_as(verify);
    verify->add_option("--labels", labels_path,
                       "CSV of held-out labels, a row per input row: with integer weights, the task metric of the model "
                       "with real and with integer weights");

    auto* cost = app.add_subcommand("cost", "flash, RAM, stack, multiply-accumulates and field evaluations");
    cost->add_option("model", model, "description (.mnd)")->required();
    cost->add_option("--input", input, "CSV of input rows: measure field evaluations over them");
    cost->add_option("--precision", precision, "float32 (default) or float64")->check(CLI::IsMember(precisions));
    cost->add_option("--learn", learn, "also what a learning step takes for these learnable parameters (as compile --learn)");
    cost->add_option("--learn-by", learn_by, "steps or adjoint (as compile --learn-by)");
    cost->add_option("--labels", labels_path,
                     "CSV of targets, a row per input row, for the measured learning steps (default: eval's outputs)");
    cost->add_option("--core", core, "core class for the cycle estimate")
        ->check(CLI::IsMember({"cortex-m0", "cortex-m3", "cortex-m4f", "cortex-m7"}));
    cost->add_option("--cycles-per-mac", cycles_per_mac, "override the core's cycles per multiply-accumulate")
        ->check(kFinitePositive);
    cost->add_flag("--json", json, "JSON for tools instead of text");
    cost->add_flag("--estimate-only", estimate_only,
                   "do not measure cycles on the emulated cores (no cross build, no emulator run)");
    add_weights_as(cost);

    double target = 1e-4;
    int sweep = 256;
    std::vector<std::string> methods;
    auto* tune = app.add_subcommand("tune", "the cheapest solver budget per continuous block that meets an error target");
    tune->add_option("model", model, "description (.mnd)")->required();
    tune->add_option("--input", input, "CSV of representative input rows")->required();
    tune->add_option("--target", target, "largest allowed |out - ref| / max(1, |ref|) (default 1e-4)")
        ->check(kFinitePositive);
    std::vector<std::string> method_keys;
    for (const auto& t : tableaux()) method_keys.emplace_back(t.key);
    tune->add_option("--method", methods, "sweep this method (repeatable; default: the block's own)")
        ->check(CLI::IsMember(method_keys));
    tune->add_option("--max-steps-sweep", sweep, "largest fixed step count tried (default 256)")
        ->check(kFinitePositive);
    bool whole_sweep = false;
    tune->add_flag("--whole-sweep", whole_sweep,
                   "try every step count up to --max-steps-sweep, not just two past the first that meets the target");
    int tune_threads = 0;
    tune->add_option("--threads", tune_threads, "threads (default: every core; the report does not depend on it)")
        ->check(CLI::NonNegativeNumber);
    tune->add_option("--precision", precision, "float32 (default) or float64")->check(CLI::IsMember(precisions));
    tune->add_option("--core", core, "core class for each candidate's estimated cycles (default cortex-m4f)")
        ->check(CLI::IsMember({"cortex-m0", "cortex-m3", "cortex-m4f", "cortex-m7"}));
    tune->add_flag("--json", json, "JSON for tools instead of text");
    add_weights_as(tune);
    bool storage_sweep = false;
    tune->add_flag("--weights-sweep", storage_sweep,
                   "tune with the weights as float, int16 and int8 in turn (each against the reference of real weights) "
                   "and recommend the storage with the fewest weight bytes that meets the target")
        ->excludes("--weights-as");
    std::string plot_path;
    tune->add_option("--plot", plot_path, "also draw deviation (or the metric) against field evaluations as an SVG file");
    auto* tune_labels =
        tune->add_option("--labels", labels_path, "CSV of held-out labels, a row per input row: report each candidate's task metric");
    double metric_slack = -1.0;
    auto* slack_opt = tune->add_option("--metric-slack", metric_slack,
                                       "with --labels: choose the cheapest budget whose held-out metric is at most this "
                                       "fraction above the deployed solver's (0.01: 1% worse)")
                          ->check(kFiniteNonNegative)
                          ->needs(tune_labels);

    RefitArgs ra;
    std::string refit_out;
    auto* refit = app.add_subcommand("refit", "fine-tune the weights for a cheaper solver; writes a new description and weights");
    refit->add_option("model", model, "description (.mnd)")->required();
    refit->add_option("--input", input, "CSV of input rows (unlabelled: the model learns to match its reference on them)")->required();
    refit->add_option("-o,--output", refit_out, "the new description NEW.mnd (NEW.npz and NEW.mnw go beside it)")->required();
    refit->add_option("--method", ra.method, "the new solver's method")->required()->check(CLI::IsMember(method_keys));
    refit->add_option("--steps", ra.steps, "fixed step: the number of steps")->check(kFinitePositive);
    refit->add_option("--rtol", ra.rtol, "adaptive: relative tolerance")->check(kFinitePositive);
    refit->add_option("--atol", ra.atol, "adaptive: absolute tolerance")->check(kFinitePositive);
    refit->add_option("--max-steps", ra.max_steps, "adaptive: attempted steps allowed")->check(kFinitePositive);
    refit->add_option("--block", ra.blocks, "give the new solver to this continuous block only (repeatable; default: all)");
    refit->add_option("--labels", ra.labels, "CSV of labels, a row per input row: report the task metric (and fit it with --fit labels)");
    refit->add_option("--check-input", ra.check_input, "CSV of rows not trained on, for the before and after figures");
    auto* check_labels_opt =
        refit->add_option("--check-labels", ra.check_labels, "CSV of labels of the --check-input rows: the task metric before and after");
    refit->add_option("--fit", ra.fit, "reference (default: match the original model) or labels")
        ->check(CLI::IsMember({"reference", "labels"}));
    check_labels_opt->needs(refit->get_option("--check-input"));
    refit->add_option("--gradient", ra.way, "discrete (default: through the steps taken) or adjoint")
        ->check(CLI::IsMember({"discrete", "adjoint"}));
    refit->add_option("--epochs", ra.o.epochs, "most epochs (default 300)")->check(kFinitePositive);
    refit->add_option("--batch", ra.o.batch, "rows per mini-batch (default 16)")->check(kFinitePositive);
    refit->add_option("--rate", ra.o.rate, "Adam step size (default 1e-5)")->check(kFinitePositive);
    refit->add_option("--holdout", ra.o.holdout, "fraction of rows held out for early stopping (default 0.25)")
        ->check(CLI::Range(0.01, 0.9));
    refit->add_option("--patience", ra.o.patience, "stop after this many epochs without a better held-out loss (default 30)")
        ->check(kFinitePositive);
    refit->add_option("--seed", ra.o.seed, "seed of the split and the batch order (default 1)");
    refit->add_option("--threads", ra.o.threads, "threads (default: every core; the result does not depend on it)")
        ->check(kFinitePositive);

    std::string other;
    double weight_tol = 0.0;
    auto* diff = app.add_subcommand("diff", "what changed between two models (exit 0 same, 1 different)");
    diff->add_option("first", model, "description (.mnd) before")->required();
    diff->add_option("second", other, "description (.mnd) after")->required();
    diff->add_option("--tolerance", weight_tol, "weight changes at or below this count as unchanged (default 0)")
        ->check(kFiniteNonNegative);
    diff->add_flag("--json", json, "JSON for tools instead of text");

    std::string under;
    auto* tensors = app.add_subcommand("tensors", "list a weights file's tensors: name, dtype, shape, min, max (and, given a description, which bind)");
    tensors->add_option("file", model, "weights file, or a description (.mnd) to list its weights")->required();
    tensors->add_option("--under", under, "key path of the dictionary of tensors in a PyTorch checkpoint (model/state_dict)");

    auto* format = app.add_subcommand("format", "print the description in canonical layout");
    format->add_option("model", model, "description (.mnd)")->required();
    format->add_flag("-i,--in-place", in_place, "rewrite the file");
    format->add_flag("--check", check_only, "exit 1 if the file is not in canonical layout")
        ->excludes(format->get_option("--in-place"));

    // A first word that is no command nor option: name the commands it is close to.
    if (argc > 1 && argv[1][0] != '-' && argv[1][0] != '\0') {
        std::vector<std::string> commands;
        for (const CLI::App* sub : app.get_subcommands({})) commands.push_back(sub->get_name());
        const std::string word = argv[1];
        if (std::find(commands.begin(), commands.end(), word) == commands.end()) {
            const std::vector<std::string> near = close_names(word, commands, std::max<std::size_t>(1, word.size() / 3));
            std::string all;
            for (const std::string& c : commands) all += (all.empty() ? "" : ", ") + c;
            if (near.empty())
                std::fprintf(stderr, "meander: unknown command '%s' (commands: %s)\n", escape_controls(word).c_str(), all.c_str());
            else
                std::fprintf(stderr, "meander: unknown command '%s'; did you mean '%s'?\n", escape_controls(word).c_str(),
                             near.front().c_str());
            return kUsageError;
        }
    }

    try {
        app.parse(argc, argv);
    } catch (const CLI::ParseError& e) {
        int rc = app.exit(e);
        return rc == 0 ? 0 : kUsageError;
    }

    try {
        const StorageOverride storage = storage_of(weights_as);
        if (*check) return cmd_check(model, precision, input, expect, expect_tol, storage);
        if (*eval) return cmd_eval(model, input, output, stats, labels_path, keep_going, storage);
        if (*compile) return cmd_compile(model, outdir, precision, c_header, self_test, dump, learn, learn_by, storage);
        if (*verify) return cmd_verify(model, input, precision, tol, cxx, keep, show, boards, storage, labels_path);
        if (*cost) return cmd_cost(model, input, precision, core, cycles_per_mac, json, estimate_only, learn, learn_by,
                                  labels_path, storage);
        if (*tune)
            return cmd_tune(model, input, precision, target, methods, sweep, json, labels_path,
                            slack_opt->count() ? std::optional<double>(metric_slack) : std::nullopt, plot_path,
                            whole_sweep, tune_threads, storage, storage_sweep, core);
        if (*refit) return cmd_refit(model, input, refit_out, ra);
        if (*diff) return cmd_diff(model, other, weight_tol, json);
        if (*format) return cmd_format(model, in_place, check_only);
        if (*tensors) return cmd_tensors(model, under);
    } catch (const std::exception& e) {
        // Every expected failure is a diagnostic; this is a last line against a crash.
        std::fprintf(stderr, "meander: internal error: %s\n", e.what());
        return kModelError;
    }
    return kUsageError;
}
