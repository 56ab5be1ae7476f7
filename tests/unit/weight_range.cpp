// Weights that float32 cannot hold are refused before code is emitted.
// Limits: IEEE 754 binary32, largest finite 3.40282347e38, smallest subnormal ~1.4e-45.
#include <gtest/gtest.h>

#include "compiler/weights.hpp"

using namespace meander;

namespace {

Model one_layer(double w00, double b0) {
    Model m;
    m.name = "m";
    m.input_size = 2;
    m.output_size = 1;
    Block b;
    b.dense.name = "a";
    b.dense.loc = Loc{3, 7};
    b.dense.in = 2;
    b.dense.out = 1;
    b.dense.weight_tensor = "a.weight";
    b.dense.bias_tensor = "a.bias";
    b.dense.weight = Eigen::MatrixXd(1, 2);
    b.dense.weight << 0.5, w00;
    b.dense.bias = Eigen::VectorXd::Constant(1, b0);
    m.blocks.push_back(b);
    return m;
}

const Source kSrc("m.mnd", "model m\ninput x[2]\ndense a: 2 -> 1\noutput y[1]\n");

}  // namespace

TEST(WeightRange, BeyondFloatIsAnError) {
    Diagnostics d;
    EXPECT_FALSE(check_weight_range(one_layer(4e38, 0.0), kSrc, Precision::float32, d));
    EXPECT_EQ(d.render(),
              "m.mnd:3:7: error: layer 'a': tensor 'a.weight' holds 4e+38 at flat index 1, beyond the float32 range "
              "(largest 3.4028235e+38); emit with --precision float64 or rescale the layer\n"
              "dense a: 2 -> 1\n"
              "      ^\n");
}

TEST(WeightRange, Float64AcceptsIt) {
    Diagnostics d;
    EXPECT_TRUE(check_weight_range(one_layer(4e38, 0.0), kSrc, Precision::float64, d));
    EXPECT_TRUE(d.all().empty());
}

TEST(WeightRange, LargestFloatIsFine) {
    Diagnostics d;
    EXPECT_TRUE(check_weight_range(one_layer(3.4028234663852886e38, -1e-40), kSrc, Precision::float32, d));
    EXPECT_TRUE(d.all().empty()) << d.render();  // 1e-40 is a float32 subnormal, not zero
}

TEST(WeightRange, FlushToZeroIsAWarning) {
    Diagnostics d;
    EXPECT_TRUE(check_weight_range(one_layer(1.0, 1e-50), kSrc, Precision::float32, d));
    EXPECT_EQ(d.error_count(), 0);
    ASSERT_EQ(d.all().size(), 1u);
    EXPECT_EQ(d.all()[0].message, "layer 'a': 1 values of tensor 'a.bias' are too small for float32 and become 0");
}
