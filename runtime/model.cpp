#include "model.hpp"

#include <array>
#include <utility>

namespace meander {

namespace {
constexpr std::array<std::pair<Activation, std::string_view>, 10> kActivationNames{{
    {Activation::identity, "identity"},
    {Activation::relu, "relu"},
    {Activation::leaky_relu, "leaky-relu"},
    {Activation::tanh, "tanh"},
    {Activation::sigmoid, "sigmoid"},
    {Activation::softplus, "softplus"},
    {Activation::silu, "silu"},
    {Activation::gelu, "gelu"},
    {Activation::elu, "elu"},
    {Activation::softmax, "softmax"},
}};
}  // namespace

std::string_view activation_name(Activation a) {
    for (const auto& [act, name] : kActivationNames)
        if (act == a) return name;
    return "identity";
}

std::optional<Activation> activation_from_name(std::string_view s) {
    for (const auto& [act, name] : kActivationNames)
        if (name == s) return act;
    return std::nullopt;
}

std::string_view weight_storage_name(WeightStorage s) {
    switch (s) {
    case WeightStorage::int8: return "int8";
    case WeightStorage::int16: return "int16";
    case WeightStorage::real: break;
    }
    return "float";
}

std::optional<WeightStorage> weight_storage_from_name(std::string_view s) {
    if (s == "float") return WeightStorage::real;
    if (s == "int8") return WeightStorage::int8;
    if (s == "int16") return WeightStorage::int16;
    return std::nullopt;
}

}  // namespace meander
