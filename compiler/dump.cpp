#include "dump.hpp"

#include <fmt/format.h>

#include "../runtime/tableau.hpp"
#include "source.hpp"

namespace meander {

namespace {

std::string solver_text(const SolverSpec& s) {
    const Tableau* t = find_tableau(s.method);
    if (t && !t->adaptive() && s.steps == 0 && s.steps_per_unit > 0)
        return fmt::format("{}, steps-per-unit {}", s.method, s.steps_per_unit);
    if (t && !t->adaptive()) return fmt::format("{}, steps {}", s.method, s.steps);
    std::string out = fmt::format("{}, rtol {}, atol {}, max-steps {}", s.method, s.rtol, s.atol, s.max_steps);
    if (s.first_step > 0) out += fmt::format(", first-step {}", s.first_step);
    out += fmt::format(", controller {}, safety {}, min-factor {}, max-factor {}",
                       s.controller == Controller::pi ? "pi" : "integral", s.safety, s.min_factor, s.max_factor);
    if (s.controller == Controller::pi) out += fmt::format(", pi-alpha {}, pi-beta {}", s.pi_alpha, s.pi_beta);
    return out;
}

void dump_blocks(const std::vector<Block>& blocks, int depth, std::string& out) {
    std::string pad(static_cast<std::size_t>(depth) * 2, ' ');
    for (const auto& b : blocks) {
        switch (b.kind) {
        case Block::Kind::dense: {
            const Dense& d = b.dense;
            out += fmt::format("{}dense {} @{}:{}  in {}{} -> out {}  {}", pad, d.name, d.loc.line, d.loc.col, d.in,
                               d.time_input ? " + t" : "", d.out, activation_name(d.act));
            if (d.act == Activation::leaky_relu || d.act == Activation::elu) out += fmt::format(" {}", d.act_param);
            out += fmt::format("  weight '{}'", d.weight_tensor);
            if (d.weight.size()) out += fmt::format(" ({}, {})", d.weight.rows(), d.weight.cols());
            if (d.has_bias) {
                out += fmt::format("  bias '{}'", d.bias_tensor);
                if (d.bias.size()) out += fmt::format(" ({})", d.bias.size());
            } else {
                out += "  no bias";
            }
            out += '\n';
            break;
        }
        case Block::Kind::residual:
            out += fmt::format("{}residual {} @{}:{}  width {}\n", pad, b.residual.name, b.residual.loc.line,
                               b.residual.loc.col, b.residual.width);
            dump_blocks(b.residual.body, depth + 1, out);
            break;
        case Block::Kind::continuous: {
            const Continuous& c = b.continuous;
            out += fmt::format("{}continuous {} @{}:{}  width {}  augment {}  t in [{}, {}]\n", pad, c.name, c.loc.line,
                               c.loc.col, c.width, c.augment, c.t0, c.t1);
            dump_blocks(c.field, depth + 1, out);
            out += fmt::format("{}  solver {}\n", pad, solver_text(c.solver));
            if (c.trained) out += fmt::format("{}  trained-with {}\n", pad, solver_text(*c.trained));
            break;
        }
        }
    }
}

std::string values_text(const Eigen::VectorXd& v) {
    std::string out;
    for (Eigen::Index i = 0; i < v.size(); ++i) out += fmt::format("{}{}", i ? ", " : "", format_double(v[i]));
    return out;
}

}  // namespace

std::string describe_vector(const VectorInfo& info, const std::string& vector, int size) {
    std::string out;
    const bool named = !info.names.empty() || !info.classes.empty();
    if (named) {
        out += info.classes.empty() ? "names " : "classes ";
        for (int i = 0; i < size; ++i) {
            const auto k = static_cast<std::size_t>(i);
            out += fmt::format("{}{}", i ? ", " : "", value_name(info, vector, i));
            if (k < info.units.size() && !info.units[k].empty()) out += fmt::format(" ({})", info.units[k]);
        }
    }
    if (const auto& s = info.standardised) {
        if (named) out += "; ";
        out += "standardised, mean ";
        out += s->mean_tensor.empty() ? fmt::format("[{}]", values_text(s->mean)) : fmt::format("'{}'", s->mean_tensor);
        out += ", scale ";
        out += s->scale_tensor.empty() ? fmt::format("[{}]", values_text(s->scale)) : fmt::format("'{}'", s->scale_tensor);
    }
    return out;
}

std::string dump_model(const Model& m) {
    std::string out = fmt::format("model {}\nweights \"{}\"\ninput {}[{}]\n", m.name, m.weights_path, m.input_name,
                                  m.input_size);
    if (const std::string v = describe_vector(m.input_info, m.input_name, m.input_size); !v.empty()) out += "  " + v + "\n";
    if (m.stream) {
        const Stream& st = *m.stream;
        out += fmt::format("state {}[{}] @{}:{}  largest-gap {}\n", st.state_name, st.state_size, st.state_loc.line,
                           st.state_loc.col, st.largest_gap);
        const Continuous& c = st.evolve;
        if (c.blend) {
            out += fmt::format("blend {} @{}:{}  width {}  (heads f, g, k: its last three layers)\n", c.name, c.loc.line,
                               c.loc.col, c.width);
            dump_blocks(c.field, 1, out);
        } else {
            out += fmt::format("continuous {} @{}:{}  width {}  t in [0, gap]\n", c.name, c.loc.line, c.loc.col, c.width);
            dump_blocks(c.field, 1, out);
            out += fmt::format("  solver {}\n", solver_text(c.solver));
            if (c.trained) out += fmt::format("  trained-with {}\n", solver_text(*c.trained));
        }
        out += fmt::format("{} {} @{}:{}\n", st.update == Stream::Update::gated ? "gated" : "merge", st.update_name,
                           st.update_loc.line, st.update_loc.col);
        dump_blocks(st.update_layers, 1, out);
        out += "readout\n";
    }
    dump_blocks(m.blocks, 0, out);
    out += fmt::format("output {}[{}]\n", m.output_name, m.output_size);
    if (const std::string v = describe_vector(m.output_info, m.output_name, m.output_size); !v.empty()) out += "  " + v + "\n";
    return out;
}

}  // namespace meander
