#include "standardise.hpp"

namespace meander {

void standardise_input(const Model& model, Eigen::VectorXd& x) {
    const auto& s = model.input_info.standardised;
    if (!s) return;
    for (Eigen::Index i = 0; i < x.size(); ++i) x[i] = (x[i] - s->mean[i]) / s->scale[i];
}

void unstandardise_output(const Model& model, Eigen::VectorXd& y) {
    const auto& s = model.output_info.standardised;
    if (!s) return;
    // Two roundings (no FMA), as the emitted code computes it.
    for (Eigen::Index i = 0; i < y.size(); ++i) {
        const double scaled = y[i] * s->scale[i];
        y[i] = scaled + s->mean[i];
    }
}

void drop_input_standardisation(Model& model) { model.input_info.standardised.reset(); }
void drop_output_standardisation(Model& model) { model.output_info.standardised.reset(); }

}  // namespace meander
