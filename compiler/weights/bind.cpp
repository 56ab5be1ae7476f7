// Binding the tensors of a set to the model's dense layers, and the check
// that the chosen precision can hold them.
#include "formats.hpp"

#include <fmt/format.h>
#include <fmt/ranges.h>

#include <algorithm>
#include <cmath>
#include <limits>

#include "../spelling.hpp"

namespace meander {

using namespace weights;

namespace {

bool ends_with(const std::string& s, const std::string& suffix) {
    return s.size() >= suffix.size() && s.compare(s.size() - suffix.size(), suffix.size(), suffix) == 0;
}

std::string quoted_list(const std::vector<std::string>& names, std::size_t limit) {
    std::string out;
    for (std::size_t i = 0; i < names.size() && i < limit; ++i)
        out += fmt::format("{}'{}'", i ? ", " : "", names[i]);
    if (names.size() > limit) out += fmt::format(" and {} more", names.size() - limit);
    return out;
}

std::string count_text(std::size_t n, const char* word) {
    return fmt::format("{} {}{}", n, word, n == 1 ? "" : "s");
}

class Binder {
public:
    Binder(const Source& src, const TensorSet& set, Diagnostics& diags)
        : src_(src), set_(set), diags_(diags), used_(set.tensors.size(), false), binding_(set.tensors.size()) {}

    // Names some layer asks for: never offered as a close name to another.
    void collect(const std::vector<Block>& bs) {
        for (const auto& b : bs) {
            if (b.kind == Block::Kind::dense) {
                wanted_.push_back(weight_name(b.dense));
                if (b.dense.has_bias) wanted_.push_back(bias_name(b.dense));
            } else if (b.kind == Block::Kind::residual) {
                collect(b.residual.body);
            } else {
                collect(b.continuous.field);
            }
        }
    }

    void blocks(std::vector<Block>& bs) {
        for (auto& b : bs) {
            if (b.kind == Block::Kind::dense) dense(b.dense);
            else if (b.kind == Block::Kind::residual) blocks(b.residual.body);
            else blocks(b.continuous.field);
        }
    }

    const std::vector<std::string>& binding() const { return binding_; }

    // The tensors a standardised input or output names: shape (N,) or (1, N),
    // finite, and for the scale no zero.
    void collect_vector(const VectorInfo& info) {
        if (!info.standardised) return;
        if (!info.standardised->mean_tensor.empty()) wanted_.push_back(info.standardised->mean_tensor);
        if (!info.standardised->scale_tensor.empty()) wanted_.push_back(info.standardised->scale_tensor);
    }

    void vector(VectorInfo& info, const char* kind, const std::string& vec, int size) {
        if (!info.standardised) return;
        Standardised& st = *info.standardised;
        const std::string who = fmt::format("{} '{}'", kind, vec);
        if (!st.mean_tensor.empty()) vector_tensor(who, st.mean_tensor, st.mean_loc, "mean", size, st.mean);
        if (!st.scale_tensor.empty()) vector_tensor(who, st.scale_tensor, st.scale_loc, "scale", size, st.scale);
    }

    void unused(const Model& model) {
        std::vector<std::string> names;
        std::vector<bool> pattern_hit(model.ignore.size(), false);
        for (std::size_t i = 0; i < used_.size(); ++i) {
            bool ignored = false;
            for (std::size_t p = 0; p < model.ignore.size(); ++p)
                if (name_matches(model.ignore[p], set_.tensors[i].name)) ignored = pattern_hit[p] = true;
            if (used_[i]) continue;
            if (ignored) binding_[i] = "ignored";
            else names.push_back(set_.tensors[i].name);
        }
        // A pattern that matches nothing is most likely misspelt.
        for (std::size_t p = 0; p < model.ignore.size(); ++p)
            if (!pattern_hit[p])
                diags_.warning(src_, model.ignore_locs[p],
                               fmt::format("ignore pattern '{}' matches no tensor in {}", model.ignore[p], set_.path));
        if (names.empty()) return;
        std::string msg = names.size() == 1
            ? fmt::format("tensor '{}' in {} is not used by any layer", names[0], set_.path)
            : fmt::format("{} tensors in {} are not used by any layer: {}", names.size(), set_.path, quoted_list(names, 10));
        // Unless each one is explained already (a close name of a missing tensor, a no-bias layer's bias), say how
        // to leave out the tensors a model carries but does not need (normalisation buffers, optimiser state).
        bool unexplained = false;
        for (const auto& n : names) {
            bool explained = std::find(offered_.begin(), offered_.end(), n) != offered_.end();
            for (const Dense* d : no_bias_) explained = explained || n == bias_name(*d);
            unexplained = unexplained || !explained;
        }
        if (unexplained) msg += "; a tensor the model does not need goes in an 'ignore' statement";
        diags_.error(src_, model.weights_loc, msg);
        // A bias left over by a layer declared without one is the usual cause.
        for (const Dense* d : no_bias_)
            for (const auto& n : names)
                if (n == bias_name(*d))
                    diags_.note(src_, d->loc, fmt::format("layer '{}' is declared no-bias", d->name));
    }

private:
    const Source& src_;
    const TensorSet& set_;
    Diagnostics& diags_;
    std::vector<bool> used_;
    std::vector<std::string> binding_;
    std::vector<const Dense*> no_bias_;
    std::vector<std::string> wanted_;
    std::vector<std::string> offered_;   // tensors named as close names of a missing one

    void vector_tensor(const std::string& who, const std::string& name, Loc loc, const char* role, int size,
                       Eigen::VectorXd& out) {
        const Tensor* t = nullptr;
        for (std::size_t i = 0; i < set_.tensors.size() && !t; ++i)
            if (set_.tensors[i].name == name) {
                t = &set_.tensors[i];
                used_[i] = true;
                binding_[i] = fmt::format("{} {}", who, role);
            }
        if (!t) {
            std::vector<std::string> close;
            for (const auto& c : set_.tensors)
                if (std::find(wanted_.begin(), wanted_.end(), c.name) == wanted_.end() && edit_distance(name, c.name) <= 2)
                    close.push_back(c.name);
            offered_.insert(offered_.end(), close.begin(), close.end());
            diags_.error(src_, loc, fmt::format("{}: no tensor '{}' in {}{}", who, name, set_.path,
                                                close.empty() ? fmt::format(" (it holds {})", count_text(set_.tensors.size(), "tensor"))
                                                              : "; close names: " + quoted_list(close, 5)));
            return;
        }
        const std::size_t n = static_cast<std::size_t>(std::max(size, 0));
        const bool flat = t->shape == std::vector<std::size_t>{n} || t->shape == std::vector<std::size_t>{1, n};
        if (!flat || t->values.size() != n) {
            diags_.error(src_, loc, fmt::format("{}: tensor '{}' has shape {}, expected ({},) for its {} values", who, name,
                                                shape_text(t->shape), n, n));
            return;
        }
        for (std::size_t i = 0; i < n; ++i) {
            const double v = t->values[i];
            const bool bad = !std::isfinite(v) || (std::string_view(role) == "scale" && v == 0.0);
            if (!bad) continue;
            diags_.error(src_, loc, fmt::format("{}: tensor '{}' holds {} at index {}; a {} must be finite{}", who, name,
                                                format_double(v), i, role,
                                                std::string_view(role) == "scale" ? " and not zero" : ""));
            return;
        }
        out = Eigen::Map<const Eigen::VectorXd>(t->values.data(), static_cast<Eigen::Index>(n));
    }

    static std::string weight_name(const Dense& d) { return d.weight_tensor.empty() ? d.name + ".weight" : d.weight_tensor; }
    static std::string bias_name(const Dense& d) { return d.bias_tensor.empty() ? d.name + ".bias" : d.bias_tensor; }

    const Tensor* lookup(const Dense& d, const std::string& name, const char* role) {
        for (std::size_t i = 0; i < set_.tensors.size(); ++i)
            if (set_.tensors[i].name == name) {
                used_[i] = true;
                binding_[i] = fmt::format("{} {}{}", d.name, role,
                                          std::string_view(role) == "weight" && d.transposed ? " (transposed)" : "");
                return &set_.tensors[i];
            }
        // Close names: a small edit away, or the same name under a prefix
        // (a module path from the training script).
        std::vector<std::pair<std::size_t, std::string>> close;
        std::size_t limit = std::max<std::size_t>(2, std::min<std::size_t>(3, name.size() / 4));
        for (const auto& t : set_.tensors) {
            if (std::find(wanted_.begin(), wanted_.end(), t.name) != wanted_.end()) continue;
            std::size_t dist = edit_distance(name, t.name);
            if (dist <= limit || ends_with(t.name, "." + name) || ends_with(name, "." + t.name)) close.emplace_back(dist, t.name);
        }
        std::sort(close.begin(), close.end());
        std::string msg = fmt::format("layer '{}': no tensor '{}' in {}", d.name, name, set_.path);
        if (!close.empty()) {
            std::vector<std::string> names;
            for (auto& c : close) names.push_back(c.second);
            offered_.insert(offered_.end(), names.begin(), names.end());
            msg += fmt::format("; close names: {}", quoted_list(names, 5));
        } else {
            msg += fmt::format(" (it holds {})", count_text(set_.tensors.size(), "tensor"));
        }
        diags_.error(src_, d.loc, msg);
        return nullptr;
    }

    bool shape_ok(const Dense& d, const Tensor& t, const std::vector<std::size_t>& want) {
        if (t.shape == want) {
            // The readers guarantee this; a set built in code might not.
            if (t.values.size() == *element_count(want)) return true;
            diags_.error(src_, d.loc, fmt::format("layer '{}': tensor '{}' holds {} values for its shape {}", d.name,
                                                  t.name, t.values.size(), shape_text(t.shape)));
            return false;
        }
        std::string msg = fmt::format("layer '{}': tensor '{}' has shape {}, expected {}", d.name, t.name,
                                      shape_text(t.shape), shape_text(want));
        const bool is_weight = want.size() == 2;
        if (is_weight && t.shape.size() == 2 && want[0] != want[1] && t.shape[0] == want[1] && t.shape[1] == want[0])
            msg += d.transposed ? ": it looks stored (out, in), not (in, out) as 'transposed' says"
                                : ": it looks transposed (a weight is (out, in); write 'transposed' for a file that stores (in, out))";
        else if (d.time_input && is_weight && t.shape.size() == 2 && !d.transposed && t.shape[0] == want[0] && t.shape[1] + 1 == want[1])
            msg += fmt::format(": with '+ t' the weight has one more column, for time (the {})", d.time_first ? "first" : "last");
        else if (d.time_input && is_weight && t.shape.size() == 2 && d.transposed && t.shape[1] == want[1] && t.shape[0] + 1 == want[0])
            msg += fmt::format(": with '+ t' the weight has one more row (stored (in, out)), for time (the {})",
                               d.time_first ? "first" : "last");
        diags_.error(src_, d.loc, msg);
        return false;
    }

    bool finite(const Dense& d, const Tensor& t) {
        for (std::size_t i = 0; i < t.values.size(); ++i) {
            double v = t.values[i];
            if (std::isfinite(v)) continue;
            const char* what = std::isnan(v) ? "NaN" : v > 0 ? "inf" : "-inf";
            // The multi-index too: people look values up as w[i, j].
            std::vector<std::size_t> idx(t.shape.size());
            std::size_t rest = i;
            for (std::size_t k = t.shape.size(); k-- > 0;) {
                idx[k] = rest % t.shape[k];
                rest /= t.shape[k];
            }
            diags_.error(src_, d.loc, fmt::format("layer '{}': tensor '{}' holds {} at flat index {} [{}]",
                                                  d.name, t.name, what, i, fmt::join(idx, ", ")));
            return false;
        }
        return true;
    }

    void dense(Dense& d) {
        const std::size_t out = static_cast<std::size_t>(std::max(d.out, 0));
        const std::size_t in = static_cast<std::size_t>(std::max(d.in_total(), 0));
        const Tensor* w = lookup(d, weight_name(d), "weight");
        if (w && shape_ok(d, *w, stored_weight_shape(d)) && finite(d, *w)) {
            d.weight.resize(static_cast<Eigen::Index>(out), static_cast<Eigen::Index>(in));
            for (std::size_t r = 0; r < out; ++r)
                for (std::size_t c = 0; c < in; ++c)
                    d.weight(static_cast<Eigen::Index>(r), static_cast<Eigen::Index>(c)) = w->values[stored_weight_index(d, r, c)];
        }
        if (!d.has_bias) {
            d.bias.resize(0);
            no_bias_.push_back(&d);
            return;
        }
        const Tensor* b = lookup(d, bias_name(d), "bias");
        if (b && shape_ok(d, *b, {out}) && finite(d, *b)) {
            d.bias.resize(static_cast<Eigen::Index>(out));
            for (std::size_t r = 0; r < out; ++r) d.bias(static_cast<Eigen::Index>(r)) = b->values[r];
        }
    }
};

}  // namespace

std::vector<std::size_t> stored_weight_shape(const Dense& d) {
    const std::size_t out = static_cast<std::size_t>(std::max(d.out, 0));
    const std::size_t in = static_cast<std::size_t>(std::max(d.in_total(), 0));
    if (d.transposed) return {in, out};
    return {out, in};
}

std::size_t stored_weight_index(const Dense& d, std::size_t row, std::size_t col) {
    const std::size_t out = static_cast<std::size_t>(std::max(d.out, 0));
    const std::size_t in = static_cast<std::size_t>(std::max(d.in_total(), 0));
    // The model keeps time last (column `in - 1`); time-first files hold it in column 0, the rest one to the right.
    if (d.time_input && d.time_first) col = col + 1 == in ? 0 : col + 1;
    return d.transposed ? col * out + row : row * in + col;
}

bool name_matches(std::string_view pattern, std::string_view name) {
    // Iterative glob matching: on a mismatch, let the last '*' take one more character.
    std::size_t p = 0, n = 0, star = std::string_view::npos, mark = 0;
    while (n < name.size()) {
        if (p < pattern.size() && (pattern[p] == '?' || pattern[p] == name[n])) {
            ++p;
            ++n;
        } else if (p < pattern.size() && pattern[p] == '*') {
            star = p++;
            mark = n;
        } else if (star != std::string_view::npos) {
            p = star + 1;
            n = ++mark;
        } else {
            return false;
        }
    }
    while (p < pattern.size() && pattern[p] == '*') ++p;
    return p == pattern.size();
}

bool bind_weights(Model& model, const Source& src, const TensorSet& set, Diagnostics& diags, std::vector<std::string>* binding) {
    int before = diags.error_count();
    Binder binder(src, set, diags);
    binder.collect(model.blocks);
    binder.collect_vector(model.input_info);
    binder.collect_vector(model.output_info);
    if (model.stream) {
        binder.collect(model.stream->evolve.field);
        binder.collect(model.stream->update_layers);
    }
    binder.vector(model.input_info, "input", model.input_name, model.input_size);
    binder.blocks(model.blocks);
    binder.vector(model.output_info, "output", model.output_name, model.output_size);
    if (model.stream) {
        binder.blocks(model.stream->evolve.field);
        binder.blocks(model.stream->update_layers);
    }
    binder.unused(model);
    if (binding) *binding = binder.binding();
    return diags.error_count() == before;
}

bool check_weight_range(const Model& model, const Source& src, Precision precision, Diagnostics& diags) {
    if (precision != Precision::float32) return true;
    const int before = diags.error_count();
    auto scan = [&](const Dense& d, const std::string& tensor, const double* v, Eigen::Index n) {
        Eigen::Index flushed = 0;
        for (Eigen::Index i = 0; i < n; ++i) {
            double a = std::fabs(v[i]);
            if (a > static_cast<double>(std::numeric_limits<float>::max())) {
                diags.error(src, d.loc,
                            fmt::format("layer '{}': tensor '{}' holds {} at flat index {}, beyond the float32 range "
                                        "(largest {}); emit with --precision float64 or rescale the layer",
                                        d.name, tensor, format_double(v[i]), i,
                                        format_float(std::numeric_limits<float>::max())));
                return;
            }
            if (a != 0.0 && static_cast<float>(v[i]) == 0.0f) ++flushed;
        }
        if (flushed)
            diags.warning(src, d.loc,
                          fmt::format("layer '{}': {} values of tensor '{}' are too small for float32 and become 0",
                                      d.name, flushed, tensor));
    };
    for_each_model_dense(model, [&](const Dense& d) {
        // Eigen stores the weight column-major; the order only matters for the index in the message.
        Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor> w = d.weight;
        scan(d, d.weight_tensor, w.data(), w.size());
        if (d.has_bias) scan(d, d.bias_tensor, d.bias.data(), d.bias.size());
    });
    // The emitted code holds mean and scale as float too: a scale that rounds to zero or overflows divides by
    // zero or infinity there.
    auto scan_vector = [&](const VectorInfo& info, const char* kind, const std::string& vec) {
        if (!info.standardised) return;
        const Standardised& st = *info.standardised;
        const std::pair<const Eigen::VectorXd*, Loc> parts[] = {{&st.mean, st.mean_loc}, {&st.scale, st.scale_loc}};
        for (const auto& [v, loc] : parts)
            for (Eigen::Index i = 0; i < v->size(); ++i) {
                const double a = std::fabs((*v)[i]);
                const bool scale = v == &st.scale;
                if (a > static_cast<double>(std::numeric_limits<float>::max()) || (scale && static_cast<float>(a) == 0.0f)) {
                    diags.error(src, loc, fmt::format("{} '{}': {} {} at index {} is {} in float32; emit with --precision "
                                                      "float64",
                                                      kind, vec, scale ? "scale" : "mean", format_double((*v)[i]), i,
                                                      a > 1.0 ? "beyond the range" : "zero"));
                    return;
                }
            }
    };
    scan_vector(model.input_info, "input", model.input_name);
    scan_vector(model.output_info, "output", model.output_name);
    return diags.error_count() == before;
}

}  // namespace meander
