#include "load.hpp"

#include <fmt/format.h>

#include <cmath>
#include <filesystem>

#include "check.hpp"
#include "parse.hpp"
#include "weights.hpp"

namespace meander {

namespace fs = std::filesystem;

namespace {

bool names_standardisation(const VectorInfo& info, const std::string& tensor) {
    return info.standardised && (info.standardised->mean_tensor == tensor || info.standardised->scale_tensor == tensor);
}

// The vectors no layer binds (see LoadedModel::loose_vectors).
std::vector<Tensor> loose_vectors(const Model& model, const TensorSet& set, const std::vector<std::string>& binding) {
    std::vector<Tensor> out;
    for (std::size_t i = 0; i < set.tensors.size(); ++i) {
        const Tensor& t = set.tensors[i];
        const bool loose = binding[i] == "ignored" || names_standardisation(model.input_info, t.name) ||
                           names_standardisation(model.output_info, t.name);
        const bool vector = t.shape.size() == 1 || (t.shape.size() == 2 && t.shape[0] == 1);
        bool finite = true;
        for (double v : t.values) finite = finite && std::isfinite(v);
        if (loose && vector && finite && !t.values.empty()) out.push_back(t);
    }
    return out;
}

}  // namespace

std::string weights_path_of(const Model& model, const std::string& description_path) {
    fs::path wpath = fs::path(model.weights_path);
    if (wpath.is_relative()) wpath = fs::path(description_path).parent_path() / wpath;
    return wpath.lexically_normal().string();
}

std::optional<LoadedModel> load_model(const std::string& path, Precision precision, Diagnostics& diags,
                                      bool with_weights, std::optional<WeightStorage> storage) {
    auto src = load_source(path, diags);
    if (!src) return std::nullopt;
    auto model = parse_description(*src, diags);
    if (!model || !diags.ok()) return std::nullopt;
    CheckOptions copts;
    copts.precision = precision;
    if (!check_model(*model, *src, copts, diags)) return std::nullopt;
    LoadedModel out{std::move(*src), std::move(*model), {}, {}, {}};
    std::uint64_t hash = fnv1a64(out.source.text);
    if (with_weights) {
        if (out.model.weights_path.empty()) {
            diags.error(out.source, out.model.loc, "the description names no weights: add a line 'weights \"FILE\"'");
            return std::nullopt;
        }
        const std::string weights = weights_path_of(out.model, path);
        // A weights file's errors name the file; the note names the line that chose it.
        auto named_here = [&]() {
            diags.note(out.source, out.model.weights_loc, fmt::format("the weights file '{}' is named here", weights));
            return std::nullopt;
        };
        auto set = read_weights(weights, diags, out.model.weights_key, &out.model);
        if (!set) return named_here();
        std::vector<std::string> binding;
        if (!bind_weights(out.model, out.source, *set, diags, &binding)) return std::nullopt;
        out.loose_vectors = loose_vectors(out.model, *set, binding);
        if (!check_weight_range(out.model, out.source, precision, diags)) return std::nullopt;
        auto bytes = weights_bytes(weights, diags);
        if (!bytes) return named_here();
        hash = fnv1a64(*bytes, hash);
        out.storage_notes = quantise_model(out.model, precision, storage);
    }
    out.content_hash = fmt::format("fnv1a64:{:016x}", hash);
    return out;
}

void report_storage_notes(const LoadedModel& loaded, Diagnostics& diags) {
    for (const StorageNote& n : loaded.storage_notes)
        diags.note(loaded.source, n.layer->loc, fmt::format("layer '{}': {}", n.layer->name, n.text));
}

}  // namespace meander
