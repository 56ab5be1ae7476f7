// Integer weight storage (compiler/quantise.hpp): the quantiser's rounding
// bound, its tie rule and edge cases, and the emitted integer kernels against
// the same layers with the dequantised weights as reals, to the bit.
#include <gtest/gtest.h>

#include <cmath>
#include <functional>
#include <limits>

#include "compiler/quantise.hpp"
#include "emit_support.hpp"

using namespace meander;
using namespace meander::test;

namespace {

// Rows of random weights with the edge values a quantiser trips on: a row of
// zeros, a row with one non-zero weight, a negative largest magnitude, signed
// zeros, values far below the largest (rounding to 0), magnitudes near float's
// smallest normal and largest finite.
std::vector<double> edge_matrix(Rng& rng, int rows, int cols, bool tiny_rows = true) {
    std::vector<double> w(static_cast<std::size_t>(rows * cols));
    for (int r = 0; r < rows; ++r) {
        const double mag = std::pow(10.0, rng.uniform(-30, 30));
        for (int c = 0; c < cols; ++c) {
            double v = rng.uniform(-mag, mag);
            switch (r % 7) {
            case 0: v = 0.0; break;                                  // all zero
            case 1: v = c == cols / 2 ? -mag : 0.0; break;           // one weight, negative
            case 2: v = c % 2 ? -0.0 : v; break;                     // signed zeros among values
            case 3: v = c == 0 ? mag : v * 1e-6; break;              // most weights round to 0
            case 4: v = rng.uniform(-1.0, 1.0) * (tiny_rows ? 1.2e-38 : 1e-20); break;  // near float's smallest normal
            case 5: v = rng.uniform(-1.0, 1.0) * 3.0e38; break;      // near float's largest
            default: break;
            }
            w[static_cast<std::size_t>(r * cols + c)] = v;
        }
    }
    return w;
}

}  // namespace

// The bound of issue 12, in exact arithmetic (__float128 holds q * s exactly:
// 16 + 53 bits): |q * s - w| <= s / 2 for every weight, |q| <= top, and the
// row's largest magnitude maps to +-top. For float64 the stored scale is the
// scale the integers were rounded with.
TEST(Quantise, EveryWeightWithinHalfAScaleStep) {
    Rng rng(12);
    for (WeightStorage s : {WeightStorage::int8, WeightStorage::int16}) {
        const int top = storage_top(s);
        for (int trial = 0; trial < 200; ++trial) {
            const int rows = 1 + static_cast<int>(rng.next() % 20), cols = 1 + static_cast<int>(rng.next() % 40);
            const std::vector<double> w = edge_matrix(rng, rows, cols);
            const QuantisedRows q = quantise_rows(w, rows, cols, s, Precision::float64);
            ASSERT_TRUE(q.trouble.empty()) << q.trouble;
            ASSERT_EQ(q.q.size(), w.size());
            for (int r = 0; r < rows; ++r) {
                const double sc = q.scale[static_cast<std::size_t>(r)];
                double largest = 0;
                int at_top = 0;
                for (int c = 0; c < cols; ++c) {
                    const std::size_t k = static_cast<std::size_t>(r * cols + c);
                    largest = std::max(largest, std::fabs(w[k]));
                    ASSERT_LE(std::abs(q.q[k]), top);
                    const __float128 err = static_cast<__float128>(q.q[k]) * sc - static_cast<__float128>(w[k]);
                    ASSERT_LE(static_cast<double>(err < 0 ? -err : err), 0.5 * sc)
                        << "row " << r << " col " << c << " w " << w[k] << " q " << q.q[k] << " s " << sc;
                    if (std::abs(q.q[k]) == top) ++at_top;
                }
                if (largest == 0) {
                    EXPECT_EQ(sc, 0.0);
                } else {
                    EXPECT_GE(at_top, 1) << "row " << r;
                }
            }
        }
    }
}

// float32: the integers are the same as for float64; the stored scale is the
// float nearest, so the bound widens by |q| times that rounding (< 2^-24 s per
// unit of q) and each dequantised weight is one float product. (Rows whose
// scale would be a subnormal float are trouble: see TroubleIsNamed.)
TEST(Quantise, Float32ScalesKeepTheIntegers) {
    Rng rng(13);
    const std::vector<double> w = edge_matrix(rng, 14, 9, false);
    for (WeightStorage s : {WeightStorage::int8, WeightStorage::int16}) {
        const QuantisedRows d = quantise_rows(w, 14, 9, s, Precision::float64);
        const QuantisedRows f = quantise_rows(w, 14, 9, s, Precision::float32);
        ASSERT_TRUE(f.trouble.empty()) << f.trouble;
        EXPECT_EQ(d.q, f.q);
        for (std::size_t r = 0; r < f.scale.size(); ++r) {
            EXPECT_EQ(f.scale[r], static_cast<double>(static_cast<float>(d.scale[r])));
            for (std::size_t c = 0; c < 9; ++c) {
                const std::size_t k = r * 9 + c;
                EXPECT_EQ(f.dequantised[k],
                          static_cast<double>(static_cast<float>(f.q[k]) * static_cast<float>(f.scale[r])));
                const double bound = 0.5 * d.scale[r] + std::abs(f.q[k]) * std::fabs(f.scale[r] - d.scale[r]) +
                                     std::fabs(f.dequantised[k]) * 0x1p-24;
                EXPECT_LE(std::fabs(f.dequantised[k] - w[k]), bound) << "row " << r << " col " << c;
            }
        }
    }
}

// Ties go away from zero (C's round): with the largest weight 127 the scale is
// exactly 1, so 2.5 -> 3, -2.5 -> -3, 0.5 -> 1, -0.5 -> -1, 0.49 -> 0.
TEST(Quantise, TiesAwayFromZero) {
    const std::vector<double> w{127.0, 2.5, -2.5, 0.5, -0.5, 0.49};
    const QuantisedRows q = quantise_rows(w, 1, 6, WeightStorage::int8, Precision::float32);
    ASSERT_EQ(q.scale.at(0), 1.0);
    EXPECT_EQ(q.q, (std::vector<std::int32_t>{127, 3, -3, 1, -1, 0}));
}

TEST(Quantise, TroubleIsNamed) {
    const double inf = std::numeric_limits<double>::infinity();
    EXPECT_EQ(quantise_rows({1.0, inf}, 1, 2, WeightStorage::int8, Precision::float32).trouble,
              "weight [0, 1] is not finite");
    EXPECT_EQ(quantise_rows({0.0, 0.0, std::nan(""), 1.0}, 2, 2, WeightStorage::int8, Precision::float32).trouble,
              "weight [1, 0] is not finite");
    // A row whose scale is no normal float: 1e-40 / 127 is a float subnormal (a normal double).
    EXPECT_NE(quantise_rows({1e-40, 0.0}, 1, 2, WeightStorage::int8, Precision::float32).trouble.find("too small"),
              std::string::npos);
    EXPECT_TRUE(quantise_rows({1e-40, 0.0}, 1, 2, WeightStorage::int8, Precision::float64).trouble.empty());
}

namespace {

// A model of layers large enough to be quantised, a continuous block among them.
Model wide_model(const std::string& name, std::uint64_t seed) {
    Rng rng(seed);
    SolverSpec solver;
    solver.method = "rk4";
    solver.steps = 4;
    std::vector<Block> field;
    field.push_back(dense(rng, "f1", 12, 24, Activation::softplus, true, 1.5));   // 13 columns: written out
    field.push_back(dense(rng, "f2", 24, 12, Activation::tanh, false, 1.5));      // 24 columns: the loop
    std::vector<Block> blocks;
    blocks.push_back(dense(rng, "lift", 6, 11, Activation::tanh));                // 2 blocks and 3 rows alone
    blocks.push_back(dense(rng, "widen", 11, 12, Activation::relu));
    blocks.push_back(continuous("settle", 12, 0, 0.0, 1.0, std::move(field), solver));
    blocks.push_back(dense(rng, "head", 12, 5, Activation::identity));
    // A row of zeros: scale 0.
    blocks.back().dense.weight.row(2).setZero();
    return model(name, 6, 5, std::move(blocks));
}

// Every layer's `weight` as the quantiser left it, with reals as the storage.
Model as_reals(Model m, const std::string& name) {
    m.name = name;
    std::function<void(std::vector<Block>&)> walk = [&](std::vector<Block>& bs) {
        for (Block& b : bs) {
            if (b.kind == Block::Kind::dense) {
                b.dense.storage = WeightStorage::real;
                b.dense.qweight.clear();
                b.dense.qscale.clear();
            }
            if (b.kind == Block::Kind::continuous) walk(b.continuous.field);
            if (b.kind == Block::Kind::residual) walk(b.residual.body);
        }
    };
    walk(m.blocks);
    return m;
}

}  // namespace

// Issue 12: an integer layer equals the same layer with the dequantised real
// weights to the bit (the outside values: the real-weight model's emitted code),
// and in float64 the emitted integer model equals eval of the quantised model
// (bits and counters).
TEST(Quantise, IntegerLayersEqualTheirDequantisedRealsToTheBit) {
    const auto inputs = random_inputs(5, 40, 6);
    for (Precision p : {Precision::float32, Precision::float64}) {
        for (WeightStorage s : {WeightStorage::int8, WeightStorage::int16}) {
            Model q = wide_model("quantised", 21);
            const auto notes = quantise_model(q, p, s);
            int integer_layers = 0;
            for_each_dense(q.blocks, [&](const Dense& d) { integer_layers += d.storage == s; });
            EXPECT_EQ(integer_layers, 5);
            const Model r = as_reals(q, "dequantised");
            const auto dir = scratch_dir("quantise", fmt::format("quantise_bits_{}_{}", p == Precision::float32 ? 32 : 64,
                                                   weight_storage_name(s)));
            EmitOptions o;
            o.precision = p;
            o.meander_version = "test";
            write_files(dir, emit_model(q, o));
            write_files(dir, emit_model(r, o));
            {
                const std::string cpp = read_text(dir / "quantised.cpp");
                EXPECT_NE(cpp.find(fmt::format("const std::{}_t w_f1[", weight_storage_name(s))), std::string::npos);
                EXPECT_NE(cpp.find("const real s_head[5]"), std::string::npos);
            }
            write_text(dir / "driver.cpp", driver_source({"quantised", "dequantised"}, inputs, 6));
            const std::string err = build(dir, {"driver.cpp", "quantised.cpp", "dequantised.cpp"}, "app");
            ASSERT_EQ(err, "");
            const RunResult run_r = run("'" + (dir / "app").string() + "'");
            ASSERT_EQ(run_r.status, 0) << run_r.output;
            const auto rows = parse_driver(run_r.output);
            ASSERT_EQ(rows.size(), 2u);
            ASSERT_EQ(rows[0].size(), inputs.size());
            for (std::size_t i = 0; i < inputs.size(); ++i) {
                ASSERT_EQ(rows[0][i].result, 0);
                for (std::size_t k = 0; k < rows[0][i].out.size(); ++k) {
                    EXPECT_EQ(std::signbit(rows[0][i].out[k]), std::signbit(rows[1][i].out[k]));
                    EXPECT_EQ(rows[0][i].out[k], rows[1][i].out[k]) << "row " << i << " output " << k;
                }
                if (p != Precision::float64) continue;
                const EvalResult e = evaluate(q, Eigen::Map<const Eigen::VectorXd>(inputs[i].data(), 6));
                ASSERT_EQ(e.status, EvalStatus::ok);
                EXPECT_EQ(rows[0][i].field_evals, e.stats.field_evals);
                for (std::size_t k = 0; k < rows[0][i].out.size(); ++k)
                    EXPECT_EQ(rows[0][i].out[k], e.output[static_cast<Eigen::Index>(k)]) << "row " << i << " output " << k;
            }
            bool zero_row_noted = false;
            for (const StorageNote& n : notes) zero_row_noted = zero_row_noted || n.text == "row 2 all zero: scale 0, stored exactly";
            EXPECT_TRUE(zero_row_noted);
        }
    }
}
