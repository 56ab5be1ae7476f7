// Check, the input and output vectors' options: names and units, classes,
// standardisation written in the description. Tensors named for the
// standardisation are checked when they are bound (compiler/weights/bind.cpp).
#include <fmt/format.h>

#include <cmath>

#include "check.hpp"

namespace meander {

namespace {

struct VectorChecker {
    const Source& src;
    Diagnostics& diags;
    const char* kind;               // "input" or "output"
    const std::string& vector;
    int size;

    void error(Loc loc, const std::string& message) { diags.error(src, loc, message); }

    std::string who() const { return fmt::format("{} '{}'", kind, vector); }

    void count(std::size_t n, Loc loc, const char* what) {
        if (size >= 1 && n != static_cast<std::size_t>(size))
            error(loc, fmt::format("{} lists {} {}, but {} has {} value{}", what, n, n == 1 ? "entry" : "entries", who(), size,
                                   size == 1 ? "" : "s"));
    }

    void unique(const std::vector<std::string>& names, const std::vector<Loc>& locs, const char* what) {
        for (std::size_t i = 0; i < names.size(); ++i)
            for (std::size_t j = 0; j < i; ++j)
                if (names[i] == names[j]) {
                    error(locs[i], fmt::format("{} '{}' is given twice in {} (first as entry {})", what, names[i], who(), j + 1));
                    break;
                }
    }

    void names(const VectorInfo& info) {
        if (info.names_loc.line == 0) return;
        count(info.names.size(), info.names_loc, "'names'");
        unique(info.names, info.name_locs, "the name");
        // Units go into CSV headers and C strings: nothing that splits a column or a line.
        for (std::size_t i = 0; i < info.units.size(); ++i)
            for (unsigned char ch : info.units[i])
                if (ch == ',' || ch < 0x20 || ch == 0x7f) {
                    error(info.name_locs[i], fmt::format("the unit of '{}' holds {}; a unit may not hold a comma or a control "
                                                         "character (it heads a CSV column)",
                                                         info.names[i], ch == ',' ? "a comma" : "a control character"));
                    break;
                }
    }

    void classes(const VectorInfo& info, const Model& model) {
        if (info.classes_loc.line == 0) return;
        if (info.names_loc.line > 0)
            error(info.classes_loc, fmt::format("{} has both 'names' and 'classes'; the classes name its values", who()));
        count(info.classes.size(), info.classes_loc, "'classes'");
        if (info.classes.size() < 2) error(info.classes_loc, "'classes' needs at least two classes");
        unique(info.classes, info.class_locs, "the class");
        if (info.standardised)
            error(info.standardised->loc, fmt::format("{} has 'classes' and is 'standardised': class scores are not in a "
                                                      "unit to restore",
                                                      who()));
        (void)model;
    }

    void values(const Eigen::VectorXd& v, const std::vector<Loc>& locs, Loc list, const char* part) {
        if (locs.empty()) return;  // a tensor: checked at binding
        count(static_cast<std::size_t>(v.size()), list, part == std::string_view("mean") ? "'mean'" : "'scale'");
        for (Eigen::Index i = 0; i < v.size(); ++i) {
            const Loc at = locs[static_cast<std::size_t>(i)];
            if (!std::isfinite(v[i]))
                error(at, fmt::format("{} of {}, entry {}, is not finite", part, who(), i + 1));
            else if (part == std::string_view("scale") && v[i] == 0.0)
                error(at, fmt::format("scale of {}, entry {}, is zero: standardising divides by it", who(), i + 1));
        }
    }

    void standardised(const VectorInfo& info, const Model& model) {
        if (!info.standardised) return;
        const Standardised& s = *info.standardised;
        if (std::string_view(kind) == "output" && !model.blocks.empty() &&
            model.blocks.back().kind == Block::Kind::dense && model.blocks.back().dense.act == Activation::softmax)
            error(s.loc, fmt::format("{} comes from softmax (probabilities): it cannot be 'standardised'", who()));
        values(s.mean, s.mean_value_locs, s.mean_loc, "mean");
        values(s.scale, s.scale_value_locs, s.scale_loc, "scale");
    }
};

}  // namespace

void check_vectors(const Model& model, const Source& src, Diagnostics& diags) {
    VectorChecker in{src, diags, "input", model.input_name, model.input_size};
    in.names(model.input_info);
    if (model.input_info.classes_loc.line > 0)
        diags.error(src, model.input_info.classes_loc, "'classes' names the output's values; the input takes 'names'");
    in.standardised(model.input_info, model);
    VectorChecker out{src, diags, "output", model.output_name, model.output_size};
    out.names(model.output_info);
    out.classes(model.output_info, model);
    out.standardised(model.output_info, model);
}

}  // namespace meander
