// Activations in numerically stable forms, for double (reference) and float.
// The emitter writes the same formulas into emitted code (compiler/emit/activations.cpp).
#pragma once

#include <cmath>

#include "model.hpp"

namespace meander {

// Elementwise activations; softmax is applied over a vector by the evaluator.
double activate(Activation a, double x, double param);
float activate(Activation a, float x, float param);

}  // namespace meander
