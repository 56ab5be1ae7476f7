#include "learn.hpp"

#include <fmt/format.h>

#include "../runtime/tableau.hpp"
#include "spelling.hpp"

namespace meander {

namespace {

// Every dense layer inside a block, for a block named in `learn layers`.
void collect(const std::vector<Block>& blocks, const std::string& name, bool inside, std::vector<const Dense*>& out,
             bool& found) {
    for (const Block& b : blocks) {
        const bool here = inside || block_name(b) == name;
        found = found || block_name(b) == name;
        switch (b.kind) {
        case Block::Kind::dense:
            if (here) out.push_back(&b.dense);
            break;
        case Block::Kind::residual: collect(b.residual.body, name, here, out, found); break;
        case Block::Kind::continuous: collect(b.continuous.field, name, here, out, found); break;
        }
    }
}

void names_of(const std::vector<Block>& blocks, std::vector<std::string>& out) {
    for (const Block& b : blocks) {
        out.push_back(block_name(b));
        if (b.kind == Block::Kind::residual) names_of(b.residual.body, out);
        if (b.kind == Block::Kind::continuous) names_of(b.continuous.field, out);
    }
}

bool holds(const Block& b, const LearnPlan& plan) {
    bool any = false;
    auto visit = [&](const Dense& d) {
        if (const LearnLayer* l = plan.find(d)) any = any || l->any();
    };
    switch (b.kind) {
    case Block::Kind::dense: visit(b.dense); break;
    case Block::Kind::residual: for_each_dense(b.residual.body, visit); break;
    case Block::Kind::continuous: for_each_dense(b.continuous.field, visit); break;
    }
    return any;
}

}  // namespace

const char* learn_way_name(LearnSpec::Way w) { return w == LearnSpec::Way::adjoint ? "adjoint" : "steps"; }

std::optional<LearnPlan> plan_learning(const Model& model, const LearnSpec& spec, const Source* src,
                                       const std::string& file, Diagnostics& diags) {
    const int errors_before = diags.error_count();
    auto error = [&](Loc loc, const std::string& msg) {
        if (src != nullptr && loc.line > 0)
            diags.error(*src, loc, msg);
        else
            diags.error(file, msg);
    };
    if (model.stream) {
        error(spec.loc, "learning on the device is not emitted for streaming models yet");
        return std::nullopt;
    }
    LearnPlan plan;
    plan.way = spec.way;
    for_each_dense(model.blocks, [&](const Dense& d) { plan.layers.push_back(LearnLayer{&d}); });
    auto set = [&](const Dense* d, bool w, bool b) {
        for (LearnLayer& l : plan.layers)
            if (l.dense == d) {
                l.weight = l.weight || w;
                l.bias = l.bias || (b && d->has_bias);
            }
    };
    switch (spec.what) {
    case LearnSpec::What::all:
        for (LearnLayer& l : plan.layers) set(l.dense, true, true);
        break;
    case LearnSpec::What::biases: {
        bool any = false;
        for (LearnLayer& l : plan.layers) {
            set(l.dense, false, true);
            any = any || l.dense->has_bias;
        }
        if (!any) error(spec.loc, "'learn biases': no layer of this model has a bias");
        break;
    }
    case LearnSpec::What::head: {
        if (model.blocks.empty() || model.blocks.back().kind != Block::Kind::dense) {
            error(spec.loc, model.blocks.empty()
                                ? std::string("'learn head': the model has no layers")
                                : fmt::format("'learn head': the head is the last top-level layer, and '{}' is a {} "
                                              "block, not a dense layer; name the layers to learn instead",
                                              block_name(model.blocks.back()),
                                              model.blocks.back().kind == Block::Kind::residual ? "residual"
                                                                                                : "continuous"));
            break;
        }
        set(&model.blocks.back().dense, true, true);
        break;
    }
    case LearnSpec::What::layers: {
        std::vector<std::string> known;
        names_of(model.blocks, known);
        for (std::size_t i = 0; i < spec.layers.size(); ++i) {
            const std::string& n = spec.layers[i];
            const Loc loc = i < spec.layer_locs.size() ? spec.layer_locs[i] : spec.loc;
            std::vector<const Dense*> found_layers;
            bool found = false;
            collect(model.blocks, n, false, found_layers, found);
            if (!found) {
                const auto close = close_names(n, known, 2);
                error(loc, fmt::format("'learn': no layer or block named '{}'{}", escape_controls(n),
                                       close.empty() ? std::string() : fmt::format("; did you mean '{}'?", close[0])));
                continue;
            }
            for (std::size_t j = 0; j < i; ++j)
                if (spec.layers[j] == n) error(loc, fmt::format("'learn': '{}' is named twice", escape_controls(n)));
            for (const Dense* d : found_layers) set(d, true, true);
        }
        break;
    }
    }
    if (diags.error_count() != errors_before) return std::nullopt;
    for (LearnLayer& l : plan.layers) {
        if (l.weight) {
            l.weight_at = plan.count;
            plan.count += static_cast<std::size_t>(l.dense->out) * static_cast<std::size_t>(l.dense->in_total());
        }
        if (l.bias) {
            l.bias_at = plan.count;
            plan.count += static_cast<std::size_t>(l.dense->out);
        }
    }
    plan.first_block = model.blocks.size();
    for (std::size_t i = 0; i < model.blocks.size(); ++i)
        if (holds(model.blocks[i], plan)) {
            plan.first_block = i;
            break;
        }
    // The gradient goes back from the output to the first learnable layer:
    // every continuous block on that way must take the chosen way.
    const Loc way_loc = spec.way_written ? spec.way_loc : spec.loc;
    for (std::size_t i = plan.first_block; i < model.blocks.size(); ++i) {
        const Block& b = model.blocks[i];
        if (b.kind != Block::Kind::continuous) continue;
        const Continuous& c = b.continuous;
        const Tableau* tb = find_tableau(c.solver.method);
        if (tb != nullptr && tb->adaptive() && c.solver.steps == 0)
            error(way_loc,
                  fmt::format("'learn ... by {}': the gradient goes back through continuous block '{}', whose solver "
                              "{} is adaptive; the emitted gradient takes fixed-step blocks only (euler, midpoint, "
                              "heun, rk4, rk38 with `steps N`), so learn only layers after it or deploy a fixed-step "
                              "solver",
                              learn_way_name(spec.way), c.name, c.solver.method));
    }
    if (diags.error_count() != errors_before) return std::nullopt;
    const Block* last = model.blocks.empty() ? nullptr : &model.blocks.back();
    if (last && last->kind == Block::Kind::dense && last->dense.act == Activation::softmax)
        plan.loss = LearnLoss::cross_entropy;
    return plan;
}

std::optional<LearnSpec> learn_spec_from_option(const std::string& what, const std::string& by, Diagnostics& diags) {
    LearnSpec s;
    if (what == "biases")
        s.what = LearnSpec::What::biases;
    else if (what == "head")
        s.what = LearnSpec::What::head;
    else if (what == "all")
        s.what = LearnSpec::What::all;
    else {
        s.what = LearnSpec::What::layers;
        std::size_t at = 0;
        while (at <= what.size()) {
            std::size_t comma = what.find(',', at);
            if (comma == std::string::npos) comma = what.size();
            std::string name = what.substr(at, comma - at);
            while (!name.empty() && name.front() == ' ') name.erase(0, 1);
            while (!name.empty() && name.back() == ' ') name.pop_back();
            if (name.empty()) {
                diags.error("--learn", fmt::format("'{}': an empty layer name (expected biases, head, all or layer "
                                                   "names separated by commas)",
                                                   escape_controls(what)));
                return std::nullopt;
            }
            s.layers.push_back(name);
            at = comma + 1;
        }
    }
    if (!by.empty()) {
        if (by == "steps")
            s.way = LearnSpec::Way::steps;
        else if (by == "adjoint")
            s.way = LearnSpec::Way::adjoint;
        else {
            diags.error("--learn-by", fmt::format("'{}': expected steps or adjoint", escape_controls(by)));
            return std::nullopt;
        }
        s.way_written = true;
    }
    return s;
}

}  // namespace meander
