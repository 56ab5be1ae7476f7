// What the hand-written baselines (baseline_<sample>.cpp) share: a sample's
// tensors read through the compiler's weights reader, copied into Eigen
// fixed-size matrices by name, and the registration of each baseline.
#pragma once

#include <Eigen/Core>

#include <cstdio>
#include <cstdlib>
#include <string>

#include "bench_support.hpp"
#include "compiler/weights.hpp"

namespace meander_bench::baseline {

class Weights {
public:
    explicit Weights(meander::TensorSet set) : set_(std::move(set)) {}

    // Copies tensor `name` (C order, shape (rows, cols) or (rows,)) into m;
    // a missing or misshapen tensor ends the program: the baseline is wrong.
    template <class Matrix>
    void get(const char* name, Matrix& m) const {
        const meander::Tensor* t = set_.find(name);
        const bool vector = Matrix::ColsAtCompileTime == 1;
        const std::size_t rows = static_cast<std::size_t>(m.rows()), cols = static_cast<std::size_t>(m.cols());
        if (!t || (vector ? t->shape != std::vector<std::size_t>{rows}
                          : t->shape != std::vector<std::size_t>{rows, cols})) {
            std::fprintf(stderr, "bench_infer: %s: no tensor %s of %zu x %zu\n", set_.path.c_str(), name, rows, cols);
            std::exit(1);
        }
        for (std::size_t r = 0; r < rows; ++r)
            for (std::size_t c = 0; c < cols; ++c)
                m(static_cast<Eigen::Index>(r), static_cast<Eigen::Index>(c)) =
                    static_cast<typename Matrix::Scalar>(t->values[r * cols + c]);
    }

private:
    meander::TensorSet set_;
};

// One per sample folder that has a baseline; each registers "baseline/<sample>".
void register_fan_balance(const Sample& s, const Weights& w);
void register_boiler_ahead(const Sample& s, const Weights& w);
void register_soil_probe(const Sample& s, const Weights& w);

}  // namespace meander_bench::baseline
