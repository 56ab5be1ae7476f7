#include "activation.hpp"

#include <algorithm>

namespace meander {

// The two overloads are written out rather than templated so that the float
// one visibly calls only float functions with suffixed literals, the way the
// emitted code does.

double activate(Activation a, double x, double param) {
    switch (a) {
    case Activation::identity:
    case Activation::softmax:  // a vector operation, applied by the evaluator
        return x;
    case Activation::relu:
        return x > 0.0 ? x : 0.0;
    case Activation::leaky_relu:
        return x >= 0.0 ? x : param * x;
    case Activation::tanh:
        return std::tanh(x);
    case Activation::sigmoid: {
        // exp of a non-positive argument only: no overflow at either end.
        if (x >= 0.0) return 1.0 / (1.0 + std::exp(-x));
        const double ex = std::exp(x);
        return ex / (1.0 + ex);
    }
    case Activation::softplus:
        return std::max(x, 0.0) + std::log1p(std::exp(-std::fabs(x)));
    case Activation::silu: {
        if (x >= 0.0) return x / (1.0 + std::exp(-x));
        const double ex = std::exp(x);
        return x * ex / (1.0 + ex);
    }
    case Activation::gelu: {
        // tanh form (Hendrycks & Gimpel 2016); 0.7978845608028654 = sqrt(2/pi).
        const double inner = 0.7978845608028654 * (x + 0.044715 * x * x * x);
        return 0.5 * x * (1.0 + std::tanh(inner));
    }
    case Activation::elu:
        return x > 0.0 ? x : param * std::expm1(x);
    }
    return x;
}

float activate(Activation a, float x, float param) {
    switch (a) {
    case Activation::identity:
    case Activation::softmax:
        return x;
    case Activation::relu:
        return x > 0.0f ? x : 0.0f;
    case Activation::leaky_relu:
        return x >= 0.0f ? x : param * x;
    case Activation::tanh:
        return std::tanh(x);
    case Activation::sigmoid: {
        if (x >= 0.0f) return 1.0f / (1.0f + std::exp(-x));
        const float ex = std::exp(x);
        return ex / (1.0f + ex);
    }
    case Activation::softplus:
        return std::max(x, 0.0f) + std::log1p(std::exp(-std::fabs(x)));
    case Activation::silu: {
        if (x >= 0.0f) return x / (1.0f + std::exp(-x));
        const float ex = std::exp(x);
        return x * ex / (1.0f + ex);
    }
    case Activation::gelu: {
        const float inner = 0.7978845608f * (x + 0.044715f * x * x * x);
        return 0.5f * x * (1.0f + std::tanh(inner));
    }
    case Activation::elu:
        return x > 0.0f ? x : param * std::expm1(x);
    }
    return x;
}

}  // namespace meander
