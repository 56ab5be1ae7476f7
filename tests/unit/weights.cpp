// Reading weights in every supported form, the listing's exact round trip,
// and binding tensors to dense layers. The fixtures under tests/data/weights
// were written by NumPy 1.24 (make_fixtures.py); expected.json holds the bit
// patterns NumPy stored, which is what every value here is checked against.
#include "compiler/weights.hpp"

#include <gtest/gtest.h>
#include <nlohmann/json.hpp>

#include <cmath>
#include <cstdint>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <limits>
#include <random>
#include <sstream>

#include "test_support.hpp"

namespace fs = std::filesystem;
using namespace meander;
using test::dense_block;
using test::read_text;

namespace {

const fs::path data_dir = fs::path(MEANDER_SOURCE_DIR) / "tests" / "data" / "weights";

const nlohmann::json& expected() {
    static const nlohmann::json j = nlohmann::json::parse(read_text(data_dir / "expected.json"));
    return j;
}

std::string bits_of(const Tensor& t, std::size_t i) {
    char buf[24];
    if (t.dtype == "float32") {
        float f = static_cast<float>(t.values[i]);
        std::uint32_t u;
        std::memcpy(&u, &f, 4);
        std::snprintf(buf, sizeof buf, "%08x", u);
    } else {
        std::uint64_t u;
        std::memcpy(&u, &t.values[i], 8);
        std::snprintf(buf, sizeof buf, "%016llx", static_cast<unsigned long long>(u));
    }
    return buf;
}

// Compares a tensor set with NumPy's record of what it wrote (expected.json).
void expect_numpy(const TensorSet& set, const std::string& fixture) {
    const auto& want = expected().at(fixture);
    ASSERT_EQ(set.tensors.size(), want.size()) << fixture;
    for (std::size_t k = 0; k < want.size(); ++k) {
        const Tensor& t = set.tensors[k];
        const auto& w = want[k];
        SCOPED_TRACE(fixture + ": " + t.name);
        EXPECT_EQ(t.name, w.at("name").get<std::string>());
        EXPECT_EQ(t.dtype, w.at("dtype").get<std::string>());
        EXPECT_EQ(t.shape, w.at("shape").get<std::vector<std::size_t>>());
        const auto& bits = w.at("bits");
        ASSERT_EQ(t.values.size(), bits.size());
        for (std::size_t i = 0; i < bits.size(); ++i) {
            EXPECT_EQ(bits_of(t, i), bits[i].get<std::string>()) << "flat index " << i;
            if (t.dtype == "float32")  // a float32 value is held exactly in the double
                EXPECT_EQ(static_cast<double>(static_cast<float>(t.values[i])), t.values[i]);
        }
    }
}

TensorSet read_ok(const fs::path& p) {
    Diagnostics diags;
    auto set = read_weights(p.string(), diags);
    EXPECT_TRUE(set.has_value()) << diags.render();
    EXPECT_EQ(diags.render(), "");
    return set ? *set : TensorSet{};
}

fs::path scratch(const std::string& name) { return test::scratch_dir("test_weights", name); }

void write(const fs::path& p, const std::string& bytes) { test::write_text(p, bytes); }

// Every bit pattern identical, NaNs compared as NaNs (their payload is not kept).
void expect_same_bits(const TensorSet& a, const TensorSet& b) {
    ASSERT_EQ(a.tensors.size(), b.tensors.size());
    for (std::size_t k = 0; k < a.tensors.size(); ++k) {
        const Tensor& x = a.tensors[k];
        const Tensor& y = b.tensors[k];
        SCOPED_TRACE(x.name);
        EXPECT_EQ(x.name, y.name);
        EXPECT_EQ(x.dtype, y.dtype);
        EXPECT_EQ(x.shape, y.shape);
        ASSERT_EQ(x.values.size(), y.values.size());
        for (std::size_t i = 0; i < x.values.size(); ++i) {
            if (std::isnan(x.values[i])) {
                EXPECT_TRUE(std::isnan(y.values[i])) << i;
                continue;
            }
            EXPECT_EQ(bits_of(x, i), bits_of(y, i)) << "flat index " << i;
        }
    }
}

TensorSet round_trip(const TensorSet& set, const std::string& name) {
    fs::path p = scratch(name) / "w.mnw";
    write(p, write_listing(set));
    return read_ok(p);
}

// ---------------------------------------------------------------------------

TEST(Npy, EveryDtypeByteOrderVersionAndRank) {
    for (const char* f : {"f4_le.npy", "f4_be.npy", "f8_le.npy", "f8_be.npy", "v2_rank1.npy", "v3_rank4.npy",
                          "scalar.npy", "empty.npy"}) {
        SCOPED_TRACE(f);
        expect_numpy(read_ok(data_dir / f), f);
    }
}

TEST(Npy, SpecialValuesAreExact) {
    // Spot checks beside the bit comparison, from the IEEE 754 formats themselves.
    TensorSet s = read_ok(data_dir / "f4_be.npy");
    ASSERT_EQ(s.tensors.size(), 1u);
    const auto& v = s.tensors[0].values;
    EXPECT_TRUE(std::signbit(v[1]) && v[1] == 0.0);
    EXPECT_EQ(v[4], static_cast<double>(std::numeric_limits<float>::max()));
    EXPECT_EQ(v[8], static_cast<double>(std::numeric_limits<float>::denorm_min()));
    TensorSet d = read_ok(data_dir / "f8_be.npy");
    EXPECT_EQ(d.tensors[0].values[4], std::numeric_limits<double>::denorm_min());
    EXPECT_EQ(d.tensors[0].values[2], std::numeric_limits<double>::max());
}

TEST(Npy, NameIsTheFileStem) {
    TensorSet s = read_ok(data_dir / "v2_rank1.npy");
    ASSERT_EQ(s.tensors.size(), 1u);
    EXPECT_EQ(s.tensors[0].name, "v2_rank1");
    EXPECT_EQ(s.path, (data_dir / "v2_rank1.npy").string());
}

TEST(Npy, NativeOrderMarks) {
    // '=' and '|' mean the byte order of the machine that reads (as NumPy
    // takes them); the bytes are IEEE 754 binary32 1.5 and -2 in host order.
    for (const char* order : {"=", "|"}) {
        std::string data;
        for (float f : {1.5f, -2.0f}) {
            char b[4];
            std::memcpy(b, &f, 4);
            data.append(b, 4);
        }
        std::string dict = std::string("{'descr': '") + order + "f4', 'fortran_order': False, 'shape': (2,), }";
        std::string header = dict;
        while ((10 + header.size() + 1) % 64 != 0) header += ' ';
        header += '\n';
        std::string bytes = std::string("\x93NUMPY\x01\x00", 8);
        bytes += static_cast<char>(header.size() & 0xff);
        bytes += static_cast<char>(header.size() >> 8);
        fs::path p = scratch("native") / "w.npy";
        write(p, bytes + header + data);
        TensorSet s = read_ok(p);
        ASSERT_EQ(s.tensors.size(), 1u);
        EXPECT_EQ(s.tensors[0].values, (std::vector<double>{1.5, -2.0}));
        EXPECT_EQ(s.tensors[0].dtype, "float32");
    }
}

TEST(Npz, StoredMembers) { expect_numpy(read_ok(data_dir / "stored.npz"), "stored.npz"); }

TEST(Npz, DeflatedMembers) { expect_numpy(read_ok(data_dir / "deflated.npz"), "deflated.npz"); }

TEST(Folder, EveryNpySortedByName) {
    // expected.json lists the folder's arrays sorted by name; notes.txt is skipped.
    expect_numpy(read_ok(data_dir / "folder"), "folder");
}

TEST(Listing, ReadsNumpysShortestText) { expect_numpy(read_ok(data_dir / "numpy_text.mnw"), "numpy_text.mnw"); }

TEST(Listing, RoundTripOfEveryFixtureIsBitExact) {
    for (const char* f : {"f4_le.npy", "f8_be.npy", "v3_rank4.npy", "scalar.npy", "empty.npy", "stored.npz", "folder",
                          "numpy_text.mnw"}) {
        SCOPED_TRACE(f);
        TensorSet a = read_ok(data_dir / f);
        TensorSet b = round_trip(a, "fixture");
        expect_same_bits(a, b);
        expect_numpy(b, f);
    }
}

TEST(Listing, RoundTripOfExtremesAndRandomBitPatterns) {
    // Identity of bits is the expectation: every finite float and double
    // pattern must survive the text, including subnormals and -0.
    TensorSet set;
    Tensor f32{"extremes32", {}, {}, "float32"};
    for (float v : {0.0f, -0.0f, std::numeric_limits<float>::min(), -std::numeric_limits<float>::min(),
                    std::numeric_limits<float>::denorm_min(), -std::numeric_limits<float>::denorm_min(),
                    std::nextafter(std::numeric_limits<float>::min(), 0.0f), std::numeric_limits<float>::max(),
                    std::numeric_limits<float>::lowest(), std::numeric_limits<float>::infinity(),
                    -std::numeric_limits<float>::infinity(), 16777217.0f, 0.1f})
        f32.values.push_back(static_cast<double>(v));
    Tensor f64{"extremes64", {}, {}, "float64"};
    for (double v : {0.0, -0.0, std::numeric_limits<double>::min(), std::numeric_limits<double>::denorm_min(),
                     -std::numeric_limits<double>::denorm_min(), std::nextafter(std::numeric_limits<double>::min(), 0.0),
                     std::numeric_limits<double>::max(), std::numeric_limits<double>::lowest(), 0.1, 1.0 / 3.0,
                     9007199254740993.0, std::numeric_limits<double>::quiet_NaN()})
        f64.values.push_back(v);
    std::mt19937_64 gen(20261201);
    Tensor r32{"random32", {}, {}, "float32"};
    Tensor r64{"random64", {}, {}, "float64"};
    while (r32.values.size() < 3000) {
        auto u = static_cast<std::uint32_t>(gen());
        float f;
        std::memcpy(&f, &u, 4);
        if (std::isfinite(f)) r32.values.push_back(static_cast<double>(f));
    }
    while (r64.values.size() < 3000) {
        std::uint64_t u = gen();
        double d;
        std::memcpy(&d, &u, 8);
        if (std::isfinite(d)) r64.values.push_back(d);
    }
    f32.shape = {f32.values.size()};
    f64.shape = {3, 4};
    r32.shape = {10, 3, 100};
    r64.shape = {3000};
    set.tensors = {f32, f64, r32, r64};
    expect_same_bits(set, round_trip(set, "extremes"));
}

TEST(Listing, LayoutIsTheDocumentedOne) {
    // DEVELOPERS.md "Weight listing (.mnw)": rows of the last dimension start a
    // line, at most 8 values a line, a blank line before each tensor, names
    // with spaces or '#' quoted. 0.1f and 1/3 in their shortest round-trip forms.
    TensorSet set;
    set.tensors.push_back(Tensor{"a.weight", {2, 10}, {}, "float32"});
    for (int i = 0; i < 20; ++i) set.tensors[0].values.push_back(i == 19 ? static_cast<double>(0.1f) : i - 9.5);
    set.tensors.push_back(Tensor{"s", {}, {1.0 / 3.0}, "float64"});
    set.tensors.push_back(Tensor{"odd \"name\" #2", {3}, {-0.0, 1e-45, 2.5}, "float32"});
    set.tensors[2].values[1] = static_cast<double>(std::numeric_limits<float>::denorm_min());
    EXPECT_EQ(write_listing(set),
              "meander-weights 1\n"
              "\n"
              "tensor a.weight float32 2 10\n"
              "-9.5 -8.5 -7.5 -6.5 -5.5 -4.5 -3.5 -2.5\n"
              "-1.5 -0.5\n"
              "0.5 1.5 2.5 3.5 4.5 5.5 6.5 7.5\n"
              "8.5 0.1\n"
              "\n"
              "tensor s float64\n"
              "0.3333333333333333\n"
              "\n"
              "tensor \"odd \\\"name\\\" #2\" float32 3\n"
              "-0 1e-45 2.5\n");
    expect_same_bits(set, round_trip(set, "layout"));
}

TEST(Listing, CommentsBlankLinesAndCrlf) {
    fs::path p = scratch("comments") / "w.mnw";
    write(p, "# a weight listing\r\n\r\nmeander-weights 1   # version\r\n"
             "tensor b float32 2 2\r\n  1 2   # first row\r\n\r\n# between rows\r\n\t3 4\r\n");
    TensorSet s = read_ok(p);
    ASSERT_EQ(s.tensors.size(), 1u);
    EXPECT_EQ(s.tensors[0].values, (std::vector<double>{1, 2, 3, 4}));
}

TEST(WeightsBytes, FileAndFolder) {
    Diagnostics diags;
    auto file = weights_bytes((data_dir / "stored.npz").string(), diags);
    ASSERT_TRUE(file);
    EXPECT_EQ(*file, read_text(data_dir / "stored.npz"));
    auto folder = weights_bytes((data_dir / "folder").string(), diags);
    ASSERT_TRUE(folder);
    std::string want;
    for (const char* f : {"alpha.weight.npy", "mid.npy", "zeta.npy"}) {
        std::string bytes = read_text(data_dir / "folder" / f);
        want += std::string(f) + "\n" + std::to_string(bytes.size()) + "\n" + bytes;
    }
    EXPECT_EQ(*folder, want);
    EXPECT_EQ(diags.render(), "");
}

// ---------------------------------------------------------------------------
// Binding. The model is built by hand (as the parser would) for this text:
const char* description =
    "model press_line\n"
    "weights \"stored.npz\"\n"
    "input gauge[6]\n"
    "dense lift: 6 -> 16, tanh\n"
    "continuous settle: 16, t in [0, 1] {\n"
    "  residual inner: 16 {\n"
    "    dense shared_a: 16 -> 16, from \"lift_twin\"\n"
    "  }\n"
    "  solver rk4, steps 4\n"
    "}\n"
    "dense head: 16 -> 3\n"
    "output force[3]\n";

Dense make_dense(const std::string& name, Loc loc, int in, int out, const std::string& prefix = "") {
    Dense d = test::dense_layer(name, in, out);
    d.loc = loc;
    std::string p = prefix.empty() ? name : prefix;
    d.weight_tensor = p + ".weight";
    d.bias_tensor = p + ".bias";
    return d;
}

TEST(Bind, FillsMatricesThroughNestedBlocks) {
    TensorSet set = read_ok(data_dir / "stored.npz");
    // A second layer bound to the same tensors as lift, under another name.
    Tensor twin_w = *set.find("lift.weight");
    twin_w.name = "lift_twin.weight";
    twin_w.shape = {16, 16};
    twin_w.values.resize(256, 0.25);
    Tensor twin_b = *set.find("lift.bias");
    twin_b.name = "lift_twin.bias";
    set.tensors.push_back(twin_w);
    set.tensors.push_back(twin_b);

    Model m;
    m.name = "press_line";
    m.weights_loc = Loc{2, 9};
    m.blocks.push_back(dense_block(make_dense("lift", Loc{4, 8}, 6, 16)));
    Block cont;
    cont.kind = Block::Kind::continuous;
    cont.continuous.name = "settle";
    cont.continuous.width = 16;
    Block res;
    res.kind = Block::Kind::residual;
    res.residual.name = "inner";
    res.residual.width = 16;
    res.residual.body.push_back(dense_block(make_dense("shared_a", Loc{7, 11}, 16, 16, "lift_twin")));
    cont.continuous.field.push_back(res);
    m.blocks.push_back(cont);
    m.blocks.push_back(dense_block(make_dense("head", Loc{11, 7}, 16, 3)));

    Source src("press_line.mnd", description);
    Diagnostics diags;
    ASSERT_TRUE(bind_weights(m, src, set, diags)) << diags.render();
    EXPECT_EQ(diags.render(), "");

    // (out, in) in C order: W[r, c] is flat index r*in + c of NumPy's array.
    const auto& want = expected().at("stored.npz");
    const Dense& lift = m.blocks[0].dense;
    ASSERT_EQ(lift.weight.rows(), 16);
    ASSERT_EQ(lift.weight.cols(), 6);
    ASSERT_EQ(lift.bias.size(), 16);
    const Tensor* lw = set.find("lift.weight");
    for (int r = 0; r < 16; ++r)
        for (int c = 0; c < 6; ++c) {
            Tensor one{"", {}, {lift.weight(r, c)}, "float32"};
            EXPECT_EQ(bits_of(one, 0), want[0]["bits"][static_cast<std::size_t>(r * 6 + c)].get<std::string>());
            EXPECT_EQ(lift.weight(r, c), lw->values[static_cast<std::size_t>(r * 6 + c)]);
        }
    // head is float64 in the file: values stay double, bit for bit.
    const Dense& head = m.blocks[2].dense;
    ASSERT_EQ(head.weight.rows(), 3);
    ASSERT_EQ(head.weight.cols(), 16);
    for (int r = 0; r < 3; ++r)
        for (int c = 0; c < 16; ++c) {
            Tensor one{"", {}, {head.weight(r, c)}, "float64"};
            EXPECT_EQ(bits_of(one, 0), want[2]["bits"][static_cast<std::size_t>(r * 16 + c)].get<std::string>());
        }
    const Dense& inner = m.blocks[1].continuous.field[0].residual.body[0].dense;
    ASSERT_EQ(inner.weight.rows(), 16);
    EXPECT_EQ(inner.weight(15, 15), 0.25);
    EXPECT_EQ(inner.bias(3), lift.bias(3));
}

TEST(Bind, TimeColumnAndNoBias) {
    // f: 2 + t -> 2 has a (2, 3) weight, the time column last; no-bias wants no bias tensor.
    TensorSet set;
    set.path = "w.mnw";
    set.tensors.push_back(Tensor{"f.weight", {2, 3}, {1, 2, 3, 4, 5, 6}, "float64"});
    Model m;
    Dense d = make_dense("f", Loc{1, 1}, 2, 2);
    d.time_input = true;
    d.has_bias = false;
    m.blocks.push_back(dense_block(d));
    Source src("m.mnd", "dense f: 2 + t -> 2, no-bias\n");
    Diagnostics diags;
    ASSERT_TRUE(bind_weights(m, src, set, diags)) << diags.render();
    const Dense& f = m.blocks[0].dense;
    EXPECT_EQ(f.weight(0, 2), 3.0);
    EXPECT_EQ(f.weight(1, 0), 4.0);
    EXPECT_EQ(f.bias.size(), 0);
}

}  // namespace
