// `meander refit`: trains chosen blocks on labelled rows, then writes the new
// description, weights and weight listing together, or nothing (compiler/refit.hpp).
#include <fmt/format.h>
#include <unistd.h>

#include <csignal>
#include <cstdio>
#include <filesystem>

#include "compiler/check.hpp"
#include "compiler/command_support.hpp"
#include "compiler/format.hpp"
#include "compiler/npz_writer.hpp"
#include "compiler/parse.hpp"
#include "compiler/refit.hpp"

namespace meander::cli {

namespace fs = std::filesystem;

std::atomic<bool> g_interrupted{false};
extern "C" void on_interrupt(int) { g_interrupted.store(true); }


// Refit: train, then write NEW.mnd, NEW.npz and NEW.mnw together, or nothing.
int cmd_refit(const std::string& model_path, const std::string& input, const std::string& out_path, RefitArgs& a) {
    Diagnostics diags;
    auto in = load_with_rows(model_path, Precision::float64, input, diags, "refit");
    if (!in) return flush(diags), kModelError;
    const Model& model = in->loaded.model;
    RefitOptions& o = a.o;
    o.inputs = in->rows;
    o.classification = is_classifier(model);
    o.fit_labels = a.fit == "labels";
    o.way = a.way == "adjoint" ? GradientWay::adjoint : GradientWay::discrete;
    if (!a.labels.empty() && !(o.labels = read_labels(a.labels, model, in->rows.size(), diags)))
        return flush(diags), kModelError;
    if (o.fit_labels && !o.labels) {
        std::fprintf(stderr, "meander refit: --fit labels needs --labels\n");
        return kUsageError;
    }
    if (!a.check_input.empty()) {
        std::vector<int> lines;
        auto rows = read_csv_rows(a.check_input, model.input_size, diags, false, &lines, model.input_name, &model.input_info);
        if (!rows) return flush(diags), kModelError;
        o.check_inputs = *rows;
        if (!a.check_labels.empty() && !(o.check_labels = read_labels(a.check_labels, model, rows->size(), diags)))
            return flush(diags), kModelError;
    }
    const bool labelled = a.check_input.empty() ? o.labels.has_value() : o.check_labels.has_value();
    SolverSpec& sv = o.solver;
    sv.method = a.method;
    const Tableau* tb = find_tableau(a.method);
    if (a.steps > 0) sv.steps = a.steps, sv.written.push_back("steps");
    if (a.rtol > 0) sv.rtol = a.rtol, sv.written.push_back("rtol");
    if (a.atol > 0) sv.atol = a.atol, sv.written.push_back("atol");
    if (a.max_steps > 0) sv.max_steps = a.max_steps, sv.written.push_back("max-steps");
    (void)tb;
    // The new description, checked as `meander check` would: a solver line a block cannot take is a usage error.
    auto cheap = with_solver(model, a.blocks, sv, diags);
    if (!cheap) return flush(diags), kUsageError;
    const fs::path out_mnd(out_path);
    // Refuse before training, not after minutes of it: the outputs go into an existing folder.
    if (std::error_code ec; !fs::is_directory(out_mnd.parent_path().empty() ? fs::path(".") : out_mnd.parent_path(), ec)) {
        std::fprintf(stderr, "meander refit: -o %s: the folder %s does not exist; nothing trained\n", out_path.c_str(),
                     out_mnd.parent_path().string().c_str());
        return kUsageError;
    }
    const std::string stem = out_mnd.stem().string();
    const std::string npz_name = stem + ".npz";
    const std::string note = fmt::format("Refitted by meander refit from {} for solver {}", fs::path(model_path).filename().string(),
                                         format_solver(sv));
    {
        const std::string text = refit_description(in->loaded.source, model, *cheap, npz_name, note);
        Source src(out_mnd.string(), text);
        Diagnostics check_diags;
        auto parsed = parse_description(src, check_diags);
        CheckOptions copts;
        if (!parsed || !check_diags.ok() || !check_model(*parsed, src, copts, check_diags)) {
            std::string names;
            for (const Block& b : cheap->blocks)
                if (b.kind == Block::Kind::continuous && (a.blocks.empty() || std::find(a.blocks.begin(), a.blocks.end(), b.continuous.name) != a.blocks.end()))
                    names += (names.empty() ? "" : ", ") + b.continuous.name;
            std::fprintf(stderr, "meander refit: block %s cannot take solver '%s':\n%s", names.c_str(),
                         format_solver(sv).c_str(), check_diags.render().c_str());
            return kUsageError;
        }
    }
    const bool tty = isatty(fileno(stderr)) != 0;
    if (tty)
        o.progress = [](const RefitProgress& p) {
            const double left = p.epoch > 0 ? p.seconds / p.epoch * (p.epochs - p.epoch) : 0.0;
            std::fprintf(stderr, "\repoch %d/%d  loss %.4g  held-out %.4g  %.0f s, at most %.0f s left   ", p.epoch,
                         p.epochs, p.train_loss, p.holdout_loss, p.seconds, left);
            std::fflush(stderr);
        };
    o.stop = &g_interrupted;
    std::signal(SIGINT, on_interrupt);
    auto rep = refit_model(model, o, diags);
    std::signal(SIGINT, SIG_DFL);
    if (tty) std::fputs("\n", stderr);
    if (!rep) return flush(diags), kModelError;
    if (rep->end == RefitReport::End::interrupted) {
        flush(diags);
        std::fprintf(stderr, "meander refit: interrupted after %d epochs; nothing written\n", rep->epochs_run);
        return 130;
    }
    if (rep->end == RefitReport::End::diverged) {
        flush(diags);
        std::fprintf(stderr, "meander refit: diverged: %s; nothing written\n", rep->message.c_str());
        return kModelError;
    }
    const std::string text = refit_description(in->loaded.source, model, rep->model, npz_name, note);
    const TensorSet set = refit_tensors(rep->model);
    auto npz = npz_bytes(set, "float32");
    if (!npz) {
        diags.error(out_path, "cannot build the .npz archive");
        return flush(diags), kModelError;
    }
    const fs::path dir = out_mnd.parent_path();
    std::vector<std::pair<std::string, std::string>> files{
        {out_mnd.string(), text}, {(dir / npz_name).string(), *npz}, {(dir / (stem + ".mnw")).string(), write_listing(set)}};
    if (!write_files_atomic(files, diags)) return flush(diags), kModelError;
    flush(diags);
    std::fputs(render_refit(*rep, model, labelled, o.classification).c_str(), stdout);
    std::printf("\nwrote %s, %s and %s\n", files[0].first.c_str(), files[1].first.c_str(), files[2].first.c_str());
    return 0;
}

}  // namespace meander::cli
