// Diff: both models are flattened into lists of blocks and layers with their
// paths; names are unique in a checked model, so a name matches a name.
#include "diff.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>
#include <map>
#include <set>
#include <nlohmann/json.hpp>

#include "../runtime/evaluate.hpp"
#include "../runtime/integrate.hpp"
#include "../runtime/stream.hpp"
#include "format.hpp"

namespace meander {

namespace {

struct Entry {
    const Block* block = nullptr;
    std::string path;               // "settle/f1"
    std::string parent;             // name of the enclosing block; empty at the top
};


std::string kind_name(const Block& b) {
    if (b.kind == Block::Kind::continuous && b.continuous.blend) return "blend";
    switch (b.kind) {
        case Block::Kind::residual: return "residual";
        case Block::Kind::continuous: return "continuous";
        case Block::Kind::dense: break;
    }
    return "dense";
}

void flatten(const std::vector<Block>& blocks, const std::string& prefix, const std::string& parent,
             std::vector<Entry>& out) {
    for (const Block& b : blocks) {
        const std::string path = prefix.empty() ? block_name(b) : prefix + "/" + block_name(b);
        out.push_back(Entry{&b, path, parent});
        if (b.kind == Block::Kind::residual) flatten(b.residual.body, path, block_name(b), out);
        if (b.kind == Block::Kind::continuous) flatten(b.continuous.field, path, block_name(b), out);
    }
}

bool takes_parameter(Activation a) { return a == Activation::leaky_relu || a == Activation::elu; }

std::string activation_text(const Dense& d) {
    std::string s(activation_name(d.act));
    if (takes_parameter(d.act)) s += " " + format_number(d.act_param);
    return s;
}

std::string interval_text(const Continuous& c) {
    if (c.over_gap) return "[0, gap]";
    return fmt::format("[{}, {}]", format_number(c.t0), format_number(c.t1));
}

// A streaming model's evolution and update as blocks, so they diff like the readout's:
// the evolution a continuous block (or blend), the update a merge layer or a GRU
// cell's two halves, named CELL.ih and CELL.hh (the halves share the cell's name).
std::vector<Block> stream_parts(const Model& m) {
    std::vector<Block> parts;
    if (!m.stream) return parts;
    const Stream& st = *m.stream;
    Block evolve;
    evolve.kind = Block::Kind::continuous;
    evolve.continuous = st.evolve;
    parts.push_back(std::move(evolve));
    for (std::size_t i = 0; i < st.update_layers.size(); ++i) {
        Block b = st.update_layers[i];
        if (st.update == Stream::Update::gated) b.dense.name += i == 0 ? ".ih" : ".hh";
        parts.push_back(std::move(b));
    }
    return parts;
}

// The worst field evaluations of a continuous block; over a gap, at the model's largest.
long worst_evals(const Continuous& c, const Model& m) {
    if (c.blend) return 0;
    if (c.over_gap && m.stream) return worst_evolve_field_evals(*m.stream);
    return worst_field_evals(c.solver);
}

std::string summary(const Block& b) {
    switch (b.kind) {
        case Block::Kind::dense: {
            const Dense& d = b.dense;
            return fmt::format("dense {}{} -> {}, {}{}", d.in, d.time_input ? " + t" : "", d.out, activation_text(d),
                               d.has_bias ? "" : ", no-bias");
        }
        case Block::Kind::residual: return fmt::format("residual {}", b.residual.width);
        case Block::Kind::continuous: {
            const Continuous& c = b.continuous;
            if (c.blend) return fmt::format("blend {}", c.width);
            return fmt::format("continuous {}, t in {}, augment {}, solver {}", c.width, interval_text(c), c.augment,
                               format_solver(c.solver));
        }
    }
    return {};
}

void setting(std::vector<SettingChange>& out, const std::string& what, const std::string& before,
             const std::string& after) {
    if (before != after) out.push_back(SettingChange{what, before, after, {}});
}

void setting(std::vector<SettingChange>& out, const std::string& what, long before, long after) {
    setting(out, what, fmt::format("{}", before), fmt::format("{}", after));
}

// The options of two solvers whose values differ, by their description names.
std::vector<std::string> solver_settings(const SolverSpec& a, const SolverSpec& b) {
    std::vector<std::string> s;
    auto cmp = [&](const char* key, auto x, auto y) {
        if (x != y) s.push_back(key);
    };
    cmp("method", a.method, b.method);
    cmp("steps", a.steps, b.steps);
    cmp("steps-per-unit", a.steps_per_unit, b.steps_per_unit);
    cmp("rtol", a.rtol, b.rtol);
    cmp("atol", a.atol, b.atol);
    cmp("max-steps", a.max_steps, b.max_steps);
    cmp("first-step", a.first_step, b.first_step);
    cmp("controller", a.controller, b.controller);
    cmp("safety", a.safety, b.safety);
    cmp("min-factor", a.min_factor, b.min_factor);
    cmp("max-factor", a.max_factor, b.max_factor);
    cmp("pi-alpha", a.pi_alpha, b.pi_alpha);
    cmp("pi-beta", a.pi_beta, b.pi_beta);
    return s;
}

void solver_change(std::vector<SettingChange>& out, const std::string& what, const SolverSpec* a, const SolverSpec* b) {
    if (!a && !b) return;
    if (a && b) {
        std::vector<std::string> keys = solver_settings(*a, *b);
        if (keys.empty()) return;
        out.push_back(SettingChange{what, format_solver(*a), format_solver(*b), std::move(keys)});
        return;
    }
    out.push_back(SettingChange{what, a ? format_solver(*a) : "none", b ? format_solver(*b) : "none", {}});
}

std::vector<long> shape_of(const Eigen::MatrixXd& m, bool vector) {
    if (vector) return {static_cast<long>(m.rows())};
    return {static_cast<long>(m.rows()), static_cast<long>(m.cols())};
}

TensorDiff compare_tensor(const std::string& role, const std::string& name_a, const std::string& name_b,
                          const Eigen::MatrixXd& a, const Eigen::MatrixXd& b, bool vector, double tolerance) {
    TensorDiff t;
    t.role = role;
    t.name_before = name_a;
    t.name_after = name_b;
    t.shape_before = shape_of(a, vector);
    t.shape_after = shape_of(b, vector);
    if (t.shape_before != t.shape_after) {
        t.shape_changed = true;
        t.bit_identical = false;
        return t;
    }
    t.values = static_cast<long>(a.size());
    // C order, so the first of equal largest changes is the one a weight listing shows first.
    for (Eigen::Index i = 0; i < a.rows(); ++i) {
        for (Eigen::Index j = 0; j < a.cols(); ++j) {
            const double x = a(i, j), y = b(i, j);
            if (std::memcmp(&x, &y, sizeof x) != 0) t.bit_identical = false;
            const double delta = std::fabs(y - x);
            if (delta > tolerance) ++t.changed;
            if (delta > t.max_abs_change) {
                t.max_abs_change = delta;
                t.max_index = vector ? std::vector<long>{static_cast<long>(i)}
                                     : std::vector<long>{static_cast<long>(i), static_cast<long>(j)};
                t.max_before = x;
                t.max_after = y;
            }
        }
    }
    const double base = a.norm(), delta = (b - a).norm();
    if (delta == 0.0) t.rel_frobenius = 0.0;
    else t.rel_frobenius = base == 0.0 ? std::numeric_limits<double>::infinity() : delta / base;
    return t;
}

void compare_dense(const Dense& a, const Dense& b, double tolerance, ItemDiff& item) {
    auto yes_no = [](bool v) { return std::string(v ? "yes" : "no"); };
    setting(item.settings, "input width", a.in, b.in);
    setting(item.settings, "time input", yes_no(a.time_input), yes_no(b.time_input));
    setting(item.settings, "output width", a.out, b.out);
    if (a.act != b.act) setting(item.settings, "activation", activation_text(a), activation_text(b));
    else if (takes_parameter(a.act))
        setting(item.settings, "activation parameter", format_number(a.act_param), format_number(b.act_param));
    setting(item.settings, "bias", a.has_bias ? "yes" : "no-bias", b.has_bias ? "yes" : "no-bias");
    setting(item.settings, "weight tensor", a.weight_tensor, b.weight_tensor);
    if (a.has_bias && b.has_bias) setting(item.settings, "bias tensor", a.bias_tensor, b.bias_tensor);

    item.tensors.push_back(compare_tensor("weight", a.weight_tensor, b.weight_tensor, a.weight, b.weight, false, tolerance));
    if (a.has_bias && b.has_bias)
        item.tensors.push_back(compare_tensor("bias", a.bias_tensor, b.bias_tensor, a.bias, b.bias, true, tolerance));
}

void compare_continuous(const Continuous& a, const Continuous& b, const Model& ma, const Model& mb, ItemDiff& item) {
    setting(item.settings, "width", a.width, b.width);
    setting(item.settings, "augment", a.augment, b.augment);
    setting(item.settings, "interval", interval_text(a), interval_text(b));
    solver_change(item.settings, "solver", &a.solver, &b.solver);
    solver_change(item.settings, "trained-with", a.trained ? &*a.trained : nullptr, b.trained ? &*b.trained : nullptr);
    item.continuous = true;
    item.field_evals_before = worst_evals(a, ma);
    item.field_evals_after = worst_evals(b, mb);
    item.field_macs_before = field_macs(a);
    item.field_macs_after = field_macs(b);
}

ItemDiff one_sided(const Entry& e, ItemDiff::Presence presence) {
    ItemDiff item;
    item.name = block_name(*e.block);
    item.presence = presence;
    const bool after = presence == ItemDiff::Presence::added;
    (after ? item.path_after : item.path_before) = e.path;
    (after ? item.kind_after : item.kind_before) = kind_name(*e.block);
    (after ? item.summary_after : item.summary_before) = summary(*e.block);
    return item;
}

// Names of the longest common subsequence of two name lists.
std::vector<std::string> common_order(const std::vector<std::string>& x, const std::vector<std::string>& y) {
    const std::size_t n = x.size(), m = y.size();
    std::vector<std::vector<int>> len(n + 1, std::vector<int>(m + 1, 0));
    for (std::size_t i = n; i-- > 0;)
        for (std::size_t j = m; j-- > 0;)
            len[i][j] = x[i] == y[j] ? len[i + 1][j + 1] + 1 : std::max(len[i + 1][j], len[i][j + 1]);
    std::vector<std::string> out;
    for (std::size_t i = 0, j = 0; i < n && j < m;) {
        if (x[i] == y[j]) {
            out.push_back(x[i]);
            ++i, ++j;
        } else if (len[i + 1][j] >= len[i][j + 1]) {
            ++i;
        } else {
            ++j;
        }
    }
    return out;
}

// Marks as moved what changed parent, and what left the order of the
// siblings both models share (the fewest such, by a longest common subsequence).
void mark_moved(const std::vector<Entry>& ea, const std::vector<Entry>& eb, std::vector<ItemDiff>& items) {
    std::map<std::string, const Entry*> in_a, in_b;
    for (const Entry& e : ea) in_a[block_name(*e.block)] = &e;
    for (const Entry& e : eb) in_b[block_name(*e.block)] = &e;
    std::map<std::string, std::vector<std::string>> seq_a, seq_b;  // parent -> shared children in order
    for (const Entry& e : ea) {
        auto it = in_b.find(block_name(*e.block));
        if (it != in_b.end() && it->second->parent == e.parent) seq_a[e.parent].push_back(block_name(*e.block));
    }
    for (const Entry& e : eb) {
        auto it = in_a.find(block_name(*e.block));
        if (it != in_a.end() && it->second->parent == e.parent) seq_b[e.parent].push_back(block_name(*e.block));
    }
    std::set<std::string> kept;
    for (const auto& [parent, names] : seq_a)
        for (const std::string& n : common_order(names, seq_b[parent])) kept.insert(n);
    for (ItemDiff& item : items)
        if (item.presence == ItemDiff::Presence::both && !kept.count(item.name)) item.moved = true;
}

long parameters(const Model& m) {
    long n = 0;
    for_each_model_dense(m, [&](const Dense& d) { n += static_cast<long>(d.out) * d.in_total() + (d.has_bias ? d.out : 0); });
    return n;
}

// Every dense layer's matrices must have the shape its declaration gives.
bool bound(const Model& m, const char* side, Diagnostics& diags) {
    bool ok = true;
    for_each_model_dense(m, [&](const Dense& d) {
        const bool w = d.weight.rows() == d.out && d.weight.cols() == d.in_total();
        const bool bias = d.bias.size() == (d.has_bias ? d.out : 0);
        if (w && bias) return;
        diags.error(std::string(), fmt::format("diff: layer '{}' of the {} model '{}' has no weights bound to its shape",
                                               d.name, side, m.name));
        ok = false;
    });
    return ok;
}

std::string port_text(const std::string& name, int size) { return fmt::format("{}[{}]", name, size); }

// The names (with units) or class labels of a vector's values, as written.
std::string labels_text(const VectorInfo& v) {
    std::string o;
    for (std::size_t i = 0; i < v.names.size(); ++i) {
        o += (i ? ", " : "") + v.names[i];
        if (i < v.units.size() && !v.units[i].empty()) o += fmt::format(" in \"{}\"", v.units[i]);
    }
    if (!v.classes.empty()) o += (o.empty() ? "classes " : "; classes ") + fmt::format("{}", fmt::join(v.classes, ", "));
    return o.empty() ? "none" : o;
}

// Where a vector's standardisation comes from.
std::string standardised_text(const VectorInfo& v) {
    if (!v.standardised) return "none";
    const Standardised& st = *v.standardised;
    auto source = [](const std::string& tensor) { return tensor.empty() ? std::string("written") : "\"" + tensor + "\""; };
    return fmt::format("mean {} scale {}", source(st.mean_tensor), source(st.scale_tensor));
}

// The standardisations' values, when both sides have one of the same size:
// the largest change of a mean and of a scale, beyond the weight tolerance.
void standardised_values(std::vector<SettingChange>& out, const std::string& what, const VectorInfo& a,
                         const VectorInfo& b, double tolerance) {
    if (!a.standardised || !b.standardised) return;
    const Standardised& x = *a.standardised;
    const Standardised& y = *b.standardised;
    if (x.mean.size() != y.mean.size() || x.scale.size() != y.scale.size() || x.mean.size() == 0) return;
    const double dm = (x.mean - y.mean).cwiseAbs().maxCoeff();
    const double ds = (x.scale - y.scale).cwiseAbs().maxCoeff();
    if (dm > tolerance || ds > tolerance)
        setting(out, what + " standardisation values", "as bound",
                fmt::format("largest change of a mean {}, of a scale {}", format_double(dm), format_double(ds)));
}


}  // namespace

bool ItemDiff::changed() const {
    if (presence != Presence::both || kind_changed() || moved || !settings.empty()) return true;
    for (const TensorDiff& t : tensors)
        if (t.reported()) return true;
    return continuous && (field_evals_before != field_evals_after || field_macs_before != field_macs_after);
}

bool ModelDiff::same() const {
    if (!model.empty()) return false;
    return std::none_of(items.begin(), items.end(), [](const ItemDiff& i) { return i.changed(); });
}

std::optional<ModelDiff> diff_models(const Model& a, const Model& b, const DiffOptions& opts, Diagnostics& diags) {
    if (!std::isfinite(opts.weight_tolerance) || opts.weight_tolerance < 0.0) {
        diags.error(std::string(), fmt::format("diff: the weight tolerance must be a finite number at or above 0, not {}",
                                               format_double(opts.weight_tolerance)));
        return std::nullopt;
    }
    const bool ok_a = bound(a, "first", diags);
    const bool ok_b = bound(b, "second", diags);
    if (!ok_a || !ok_b) return std::nullopt;

    ModelDiff d;
    d.name_before = a.name;
    d.name_after = b.name;
    d.tolerance = opts.weight_tolerance;
    setting(d.model, "name", a.name, b.name);
    setting(d.model, "input", port_text(a.input_name, a.input_size), port_text(b.input_name, b.input_size));
    setting(d.model, "output", port_text(a.output_name, a.output_size), port_text(b.output_name, b.output_size));
    // What the values mean and how they are scaled change what the model computes and
    // what its header declares, though no layer changes.
    setting(d.model, "input names", labels_text(a.input_info), labels_text(b.input_info));
    setting(d.model, "output names", labels_text(a.output_info), labels_text(b.output_info));
    setting(d.model, "input standardisation", standardised_text(a.input_info), standardised_text(b.input_info));
    setting(d.model, "output standardisation", standardised_text(a.output_info), standardised_text(b.output_info));
    standardised_values(d.model, "input", a.input_info, b.input_info, opts.weight_tolerance);
    standardised_values(d.model, "output", a.output_info, b.output_info, opts.weight_tolerance);

    auto state_text = [](const Model& m) {
        return m.stream ? fmt::format("{}[{}], largest-gap {}", m.stream->state_name, m.stream->state_size,
                                      format_number(m.stream->largest_gap))
                        : std::string("none (not streaming)");
    };
    setting(d.model, "state", state_text(a), state_text(b));

    // A streaming model's evolution and update first, then the blocks (its readout).
    const std::vector<Block> parts_a = stream_parts(a), parts_b = stream_parts(b);
    std::vector<Entry> ea, eb;
    flatten(parts_a, "", "", ea);
    flatten(a.blocks, "", "", ea);
    flatten(parts_b, "", "", eb);
    flatten(b.blocks, "", "", eb);
    std::map<std::string, const Entry*> by_name_a;
    for (const Entry& e : ea) by_name_a[block_name(*e.block)] = &e;

    // The second model's order, which is what the reviewed description shows.
    std::set<std::string> in_b;
    for (const Entry& e : eb) {
        in_b.insert(block_name(*e.block));
        auto it = by_name_a.find(block_name(*e.block));
        if (it == by_name_a.end()) {
            d.items.push_back(one_sided(e, ItemDiff::Presence::added));
            continue;
        }
        const Entry& e_a = *it->second;
        ItemDiff item;
        item.name = block_name(*e.block);
        item.path_before = e_a.path;
        item.path_after = e.path;
        item.kind_before = kind_name(*e_a.block);
        item.kind_after = kind_name(*e.block);
        item.summary_before = summary(*e_a.block);
        item.summary_after = summary(*e.block);
        if (e_a.block->kind == e.block->kind) {
            switch (e.block->kind) {
                case Block::Kind::dense: compare_dense(e_a.block->dense, e.block->dense, opts.weight_tolerance, item); break;
                case Block::Kind::residual:
                    setting(item.settings, "width", e_a.block->residual.width, e.block->residual.width);
                    break;
                case Block::Kind::continuous:
                    compare_continuous(e_a.block->continuous, e.block->continuous, a, b, item);
                    break;
            }
        }
        d.items.push_back(std::move(item));
    }
    // What only the first model has goes after what preceded it there.
    for (std::size_t i = 0; i < ea.size(); ++i) {
        const std::string& name = block_name(*ea[i].block);
        if (in_b.count(name)) continue;
        std::size_t at = 0;
        for (std::size_t k = i; k-- > 0 && at == 0;) {
            const std::string& prev = block_name(*ea[k].block);
            for (std::size_t p = 0; p < d.items.size(); ++p)
                if (d.items[p].name == prev) at = p + 1;
        }
        d.items.insert(d.items.begin() + static_cast<std::ptrdiff_t>(at), one_sided(ea[i], ItemDiff::Presence::removed));
    }
    mark_moved(ea, eb, d.items);

    d.parameters_before = parameters(a);
    d.parameters_after = parameters(b);
    d.weight_bytes_before = d.parameters_before * 4;
    d.weight_bytes_after = d.parameters_after * 4;
    return d;
}

// --- text --------------------------------------------------------------------

namespace {

// A weight as the weight listing writes it (float32 values shortest for float).
std::string weight_text(double v) {
    const float f = static_cast<float>(v);
    return static_cast<double>(f) == v ? format_float(f) : format_double(v);
}

std::string index_text(const std::vector<long>& idx) { return fmt::format("[{}]", fmt::join(idx, ", ")); }

std::string shape_text(const std::vector<long>& s) { return fmt::format("{}", fmt::join(s, "x")); }

std::string signed_delta(long before, long after) {
    const long d = after - before;
    return d > 0 ? fmt::format("+{}", d) : fmt::format("{}", d);
}

// Columns padded to their widest cell, two spaces apart, `indent` spaces in.
std::string table(const std::vector<std::vector<std::string>>& rows, int indent) {
    std::vector<std::size_t> width;
    for (const auto& r : rows)
        for (std::size_t c = 0; c < r.size(); ++c) {
            if (width.size() <= c) width.push_back(0);
            width[c] = std::max(width[c], r[c].size());
        }
    std::string out;
    for (const auto& r : rows) {
        std::string line(static_cast<std::size_t>(indent), ' ');
        for (std::size_t c = 0; c < r.size(); ++c) {
            line += r[c];
            if (c + 1 < r.size()) line += std::string(width[c] - r[c].size() + 2, ' ');
        }
        while (!line.empty() && line.back() == ' ') line.pop_back();
        out += line + "\n";
    }
    return out;
}

// Four digits are enough to judge the size of a change; the JSON carries the exact value.
std::string relative_text(double r) {
    return std::isinf(r) ? std::string("n/a (was all zero)") : fmt::format("{:.4g}", r);
}

std::string tensor_name_text(const TensorDiff& t) {
    return t.name_before == t.name_after ? t.name_before : t.name_before + " -> " + t.name_after;
}

std::string item_text(const ItemDiff& i) {
    using P = ItemDiff::Presence;
    if (i.presence == P::added) return fmt::format("+ {}  {}\n", i.path_after, i.summary_after);
    if (i.presence == P::removed) return fmt::format("- {}  {}\n", i.path_before, i.summary_before);
    std::string t = fmt::format("~ {}  {}\n", i.path_after, i.kind_after);
    std::vector<std::vector<std::string>> rows;
    if (i.moved) rows.push_back({"moved", i.path_before == i.path_after ? "within its block" : "from " + i.path_before});
    // Two rows: a dense summary has an arrow of its own.
    if (i.kind_changed()) {
        rows.push_back({"kind was", i.summary_before});
        rows.push_back({"kind now", i.summary_after});
    }
    for (const SettingChange& s : i.settings) {
        std::string line = fmt::format("{} -> {}", s.before, s.after);
        if (!s.settings.empty()) line += fmt::format("  ({})", fmt::join(s.settings, ", "));
        rows.push_back({s.what, line});
    }
    if (i.continuous && i.field_evals_before != i.field_evals_after)
        rows.push_back({"field evals", fmt::format("{} -> {} ({}), worst case", i.field_evals_before, i.field_evals_after,
                                                   signed_delta(i.field_evals_before, i.field_evals_after))});
    if (i.continuous && i.field_macs_before != i.field_macs_after)
        rows.push_back({"MACs per eval", fmt::format("{} -> {} ({})", i.field_macs_before, i.field_macs_after,
                                                     signed_delta(i.field_macs_before, i.field_macs_after))});
    t += table(rows, 4);

    std::vector<std::vector<std::string>> trows;
    for (const TensorDiff& x : i.tensors) {
        if (!x.reported()) continue;
        if (x.shape_changed) {
            trows.push_back({tensor_name_text(x), fmt::format("{} -> {}", shape_text(x.shape_before), shape_text(x.shape_after)),
                             "shape changed; values not compared"});
            continue;
        }
        trows.push_back({tensor_name_text(x), shape_text(x.shape_before), fmt::format("{}/{} changed", x.changed, x.values),
                         fmt::format("largest {} at {} ({} -> {})", weight_text(x.max_abs_change), index_text(x.max_index),
                                     weight_text(x.max_before), weight_text(x.max_after)),
                         fmt::format("relative {}", relative_text(x.rel_frobenius))});
    }
    if (!trows.empty()) t += table(trows, 4);
    return t;
}

}  // namespace

std::string render_diff_text(const ModelDiff& d) {
    const std::string names = d.name_before == d.name_after ? d.name_before : d.name_before + " -> " + d.name_after;
    const std::string tol = format_number(d.tolerance);
    if (d.same())
        return fmt::format("{}: no changes ({} parameters, weight tolerance {})\n", names, d.parameters_after, tol);
    long changed = 0;
    for (const ItemDiff& i : d.items) changed += i.changed() ? 1 : 0;
    std::string t = fmt::format("{}: {} of {} blocks and layers changed (weight tolerance {})\n", names, changed,
                                d.items.size(), tol);
    std::vector<std::vector<std::string>> rows;
    for (const SettingChange& s : d.model) rows.push_back({s.what, fmt::format("{} -> {}", s.before, s.after)});
    if (!rows.empty()) t += "\n" + table(rows, 2);
    for (const ItemDiff& i : d.items)
        if (i.changed()) t += "\n" + item_text(i);
    t += "\n";
    auto total = [](long before, long after) {
        return before == after ? fmt::format("{} (unchanged)", after)
                               : fmt::format("{} -> {} ({})", before, after, signed_delta(before, after));
    };
    t += table({{"parameters", total(d.parameters_before, d.parameters_after)},
                {"weight bytes", total(d.weight_bytes_before, d.weight_bytes_after) + ", float32"}},
               0);
    return t;
}

// --- JSON --------------------------------------------------------------------

std::string render_diff_json(const ModelDiff& d) {
    using json = nlohmann::ordered_json;
    auto setting_json = [](const SettingChange& s) {
        json o{{"what", s.what}, {"before", s.before}, {"after", s.after}};
        if (!s.settings.empty()) o["settings"] = s.settings;
        return o;
    };
    auto text_or_null = [](const std::string& s) { return s.empty() ? json(nullptr) : json(s); };
    json j;
    j["before"] = d.name_before;
    j["after"] = d.name_after;
    j["same"] = d.same();
    j["weight_tolerance"] = d.tolerance;
    json model = json::array();
    for (const SettingChange& s : d.model) model.push_back(setting_json(s));
    j["model"] = model;
    json items = json::array();
    for (const ItemDiff& i : d.items) {
        if (!i.changed()) continue;
        const char* presence = i.presence == ItemDiff::Presence::added     ? "added"
                               : i.presence == ItemDiff::Presence::removed ? "removed"
                                                                           : "both";
        json o{{"name", i.name},
               {"presence", presence},
               {"path_before", text_or_null(i.path_before)},
               {"path_after", text_or_null(i.path_after)},
               {"kind_before", text_or_null(i.kind_before)},
               {"kind_after", text_or_null(i.kind_after)},
               {"summary_before", text_or_null(i.summary_before)},
               {"summary_after", text_or_null(i.summary_after)},
               {"moved", i.moved}};
        json settings = json::array();
        for (const SettingChange& s : i.settings) settings.push_back(setting_json(s));
        o["settings"] = settings;
        if (i.continuous) {
            o["field_evals_worst_before"] = i.field_evals_before;
            o["field_evals_worst_after"] = i.field_evals_after;
            o["macs_per_field_eval_before"] = i.field_macs_before;
            o["macs_per_field_eval_after"] = i.field_macs_after;
        }
        json tensors = json::array();
        for (const TensorDiff& x : i.tensors) {
            if (!x.reported()) continue;
            json t{{"role", x.role},        {"name_before", x.name_before}, {"name_after", x.name_after},
                   {"shape_before", x.shape_before}, {"shape_after", x.shape_after}, {"shape_changed", x.shape_changed}};
            if (!x.shape_changed) {
                t["values"] = x.values;
                t["changed"] = x.changed;
                t["bit_identical"] = x.bit_identical;
                t["max_abs_change"] = x.max_abs_change;
                t["max_index"] = x.max_index;
                t["max_before"] = x.max_before;
                t["max_after"] = x.max_after;
                t["relative_frobenius"] = std::isinf(x.rel_frobenius) ? json(nullptr) : json(x.rel_frobenius);
            }
            tensors.push_back(t);
        }
        o["tensors"] = tensors;
        items.push_back(o);
    }
    j["items"] = items;
    j["parameters_before"] = d.parameters_before;
    j["parameters_after"] = d.parameters_after;
    j["weight_bytes_before"] = d.weight_bytes_before;
    j["weight_bytes_after"] = d.weight_bytes_after;
    return j.dump(2) + "\n";
}

}  // namespace meander
