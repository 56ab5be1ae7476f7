// Quantise: dense weights stored as 8- or 16-bit integers with one scale per
// output row (issue 12), applied to a bound model.
//
// Per row j: s_j = max_i |w_ji| / top (top = 127 or 32767), computed in double
// and stored rounded to the working precision; q_ji = w_ji / s_j (in double)
// rounded to the nearest integer, ties away from zero (std::round), clamped to
// [-top, top]. The integers do not depend on the working precision, only the
// stored scale's rounding does. The dequantised weight is fl(real(q) * s) in the
// working precision; the emitted kernel forms exactly that product before the
// multiply-accumulate, and `weight` holds it for the reference, so an integer
// layer equals the same layer with these real weights to the bit.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "../runtime/model.hpp"

namespace meander {

// The largest integer of a storage (127, 32767); 0 for reals.
int storage_top(WeightStorage s);
// Bytes per stored weight (1, 2; the real's size for reals).
int storage_bytes(WeightStorage s, Precision p);

// A layer with fewer weights than this stays in the working precision: the
// scales and the integer kernel's extra code outweigh what the integers save
// (measured with arm-none-eabi-size, Cortex-M4F -Os; see quantise.cpp).
long min_quantised_weights(WeightStorage s);

struct QuantisedRows {
    int rows = 0, cols = 0;
    std::vector<std::int32_t> q;        // rows x cols, row-major
    std::vector<double> scale;          // per row, a value of the working precision
    std::vector<double> dequantised;    // rows x cols: fl(real(q) * s) in the working precision
    std::vector<int> zero_rows;         // rows whose weights are all zero: scale 0, exact
    std::string trouble;                // not quantisable (a non-finite weight, a scale that underflows): why
};

// Plain data in and out; `w` is rows x cols, row-major.
QuantisedRows quantise_rows(const std::vector<double>& w, int rows, int cols, WeightStorage s, Precision p);

// fl(real(q) * s) in the precision p.
double dequantise(std::int32_t q, double s, Precision p);

// What quantise_model did to a layer that was asked for integers (or given them).
struct StorageNote {
    const Dense* layer = nullptr;
    std::string text;                   // "kept in float: ...", "rows 3, 7 all zero: scale 0 (exact)"
};

// Every dense layer of the model takes the storage asked for it: `override`
// when given, else its own `weights-as` option, else its enclosing block's,
// else the model's, else reals. A layer asked for integers is quantised (its
// weights replaced by the dequantised ones) unless it is too small to gain or
// its weights cannot be quantised; then it stays real and a note says why.
// Weights must be bound.
std::vector<StorageNote> quantise_model(Model& model, Precision p, std::optional<WeightStorage> override);

// Bytes of one dense layer's weight table and scales as emitted (biases not counted).
long weight_table_bytes(const Dense& d, WeightStorage s, Precision p);

}  // namespace meander
