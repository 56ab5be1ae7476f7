// The export mistakes that `check --expect` tries when the reference evaluation
// and the training framework's outputs disagree (compiler/expect.cpp). Each is
// undone on a copy of the model; the ones that make them agree are named, with
// the statement to change at its place in the description.
#pragma once

#include <functional>
#include <string>
#include <utility>
#include <vector>

#include "../runtime/model.hpp"
#include "weights.hpp"

namespace meander {

struct Mistake {
    std::string what;                                 // "the square weight of layer 'r1' transposed"
    std::vector<std::pair<Loc, std::string>> advice;  // where in the description, and what to write there
    std::function<void(Model&)> undo;                 // on a copy of the model
    // Mistakes of one group (>= 0) change the same thing (the input's
    // standardisation, say): two of them are never tried together.
    int group = -1;
};

// The standardisation mistakes, from the 1-D tensors of the weights file that no
// layer binds (`loose`: the ignored ones and the standardisation's own, see
// LoadedModel::loose_vectors):
// - a vector the description does not standardise (or standardises with other
//   tensors) that the trained network standardises: every plausible (mean, scale)
//   pairing of the tensors with the vector's length; a tensor whose name says it
//   is a variance gives the scale as its square root (no eps added);
// - a vector the description standardises that the expected outputs were
//   computed without (the rows were standardised already, or the description
//   doubles what the network does): the standardisation dropped.
// An output that comes from softmax or has classes is never standardised.
std::vector<Mistake> standardisation_mistakes(const Model& model, const std::vector<Tensor>& loose);

}  // namespace meander
