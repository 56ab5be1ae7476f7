// Emit, the input and output vectors: the names, units and class labels of
// their values (declared in the header, defined in the source, C strings in
// flash), the standardisation tables, and most_probable for a classifier.
#include <fmt/format.h>

#include "../source.hpp"
#include "render.hpp"

namespace meander::emit_detail {

namespace {

// A C string literal that means the same in every C and C++ standard: '?' is
// escaped (no trigraph in C++11/14), every byte outside printable ASCII is
// written in octal, so no source character set is assumed.
std::string c_string(const std::string& s) {
    std::string o = "\"";
    for (unsigned char ch : s) {
        if (ch == '"' || ch == '\\' || ch == '?') {
            o += '\\';
            o += static_cast<char>(ch);
        } else if (ch < 0x20 || ch >= 0x7f) {
            o += fmt::format("\\{:03o}", static_cast<unsigned>(ch));
        } else {
            o += static_cast<char>(ch);
        }
    }
    return o + "\"";
}

std::string string_table(const char* name, const char* size, const std::vector<std::string>& values) {
    std::string o = fmt::format("const char* const {}[{}] = {{", name, size);
    for (std::size_t i = 0; i < values.size(); ++i) o += fmt::format("{}{}", i ? ", " : "", c_string(values[i]));
    return o + "};\n";
}

std::vector<std::string> names_of(const VectorInfo& info, const std::string& vector, int size) {
    std::vector<std::string> out;
    for (int i = 0; i < size; ++i) out.push_back(value_name(info, vector, i));
    return out;
}

std::vector<std::string> units_of(const VectorInfo& info, int size) {
    std::vector<std::string> out(info.units);
    out.resize(static_cast<std::size_t>(size));
    return out;
}

bool any_unit(const VectorInfo& info) {
    for (const auto& u : info.units)
        if (!u.empty()) return true;
    return false;
}

}  // namespace

bool emits_most_probable(const Model& model) {
    if (!model.output_info.classes.empty()) return true;
    return !model.blocks.empty() && model.blocks.back().kind == Block::Kind::dense &&
           model.blocks.back().dense.act == Activation::softmax;
}

std::string render_vector_declarations(const Emission& e) {
    const Model& m = e.model;
    std::string o;
    o += "// The values' names (from the description's `names`, else \"vector.index\") and units\n";
    o += "// (\"\" where none is given), in the order of input and output.\n";
    o += "extern const char* const input_names[input_size];\n";
    if (any_unit(m.input_info)) o += "extern const char* const input_units[input_size];\n";
    o += "extern const char* const output_names[output_size];\n";
    if (any_unit(m.output_info)) o += "extern const char* const output_units[output_size];\n";
    o += "\n";
    if (!m.output_info.classes.empty())
        o += "// The classes, in the order of the output's probabilities (the same strings as output_names).\n"
             "extern const char* const class_names[output_size];\n\n";
    if (emits_most_probable(m))
        o += "// The index of the largest value of an output that infer computed with result ok (the\n"
             "// most probable class); among equal largest values, the lowest index.\n"
             "std::size_t most_probable(const real* output) noexcept;\n\n";
    if (const auto& s = m.input_info.standardised)
        o += fmt::format("// infer standardises the input before the first layer: (input[i] - mean[i]) / scale[i],\n"
                         "// mean and scale from {}; the network sees only standardised values. A standardised\n"
                         "// value that is not finite returns state_not_finite.\n",
                         s->mean_tensor.empty() ? "the description" : "the weights file");
    if (const auto& s = m.output_info.standardised)
        o += fmt::format("// infer writes the last layer's y[i] as y[i] * scale[i] + mean[i] into output[i] (mean\n"
                         "// and scale from {}): the output is in the units of the training targets (checked\n"
                         "// for finiteness like a layer's result).\n",
                         s->mean_tensor.empty() ? "the description" : "the weights file");
    if (m.input_info.standardised || m.output_info.standardised) o += "\n";
    return o;
}

std::string render_standardisation_tables(const Emission& e) {
    std::string o;
    const std::string M_ = e.M();
    auto table = [&](const char* what, const std::string& vec, const Standardised& s) {
        auto one = [&](const char* part, const Eigen::VectorXd& v, const std::string& tensor) {
            std::vector<double> values(v.data(), v.data() + v.size());
            o += fmt::format("// {} '{}': {}{}\n", what, vec, part,
                             tensor.empty() ? ", from the description" : ", tensor " + escape_controls(quote_string(tensor)));
            o += fmt::format("{}_WEIGHTS_ATTR const real {}_{}[{}] = {{\n", M_, what, part, values.size());
            o += array_rows(values, e.p);
            o += "};\n";
        };
        one("mean", s.mean, s.mean_tensor);
        one("scale", s.scale, s.scale_tensor);
        o += "\n";
    };
    if (const auto& s = e.model.input_info.standardised) table("input", e.model.input_name, *s);
    if (const auto& s = e.model.output_info.standardised) table("output", e.model.output_name, *s);
    return o;
}

std::string render_vector_definitions(const Emission& e) {
    const Model& m = e.model;
    std::string o;
    o += string_table("input_names", "input_size", names_of(m.input_info, m.input_name, m.input_size));
    if (any_unit(m.input_info)) o += string_table("input_units", "input_size", units_of(m.input_info, m.input_size));
    o += string_table("output_names", "output_size", names_of(m.output_info, m.output_name, m.output_size));
    if (any_unit(m.output_info)) o += string_table("output_units", "output_size", units_of(m.output_info, m.output_size));
    if (!m.output_info.classes.empty()) o += string_table("class_names", "output_size", m.output_info.classes);
    o += "\n";
    if (emits_most_probable(m))
        o += "std::size_t most_probable(const real* output) noexcept {\n"
             "    std::size_t best = 0;\n"
             "    for (std::size_t i = 1; i < output_size; ++i)\n"
             "        if (output[i] > output[best]) best = i;\n"
             "    return best;\n"
             "}\n\n";
    return o;
}

}  // namespace meander::emit_detail
