// Activations in numerically stable forms, for double (reference) and float.
// float64 emitted code uses the same formulas (compiler/emit/activations.cpp); float32
// emitted code uses meander's own kernels (runtime/math_float.inc).
#pragma once

#include <cmath>

#include "model.hpp"

namespace meander {

// Elementwise activations; softmax is applied over a vector by the evaluator.
double activate(Activation a, double x, double param);
float activate(Activation a, float x, float param);

}  // namespace meander
