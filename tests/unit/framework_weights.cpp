// The readers of what training frameworks write: PyTorch torch.save
// checkpoints and safetensors files. The files in tests/data/frameworks and
// the values each tensor holds (frameworks.json, PyTorch's own values widened
// to float64 by PyTorch 1.13) were written by tests/data/framework_weights.py;
// the malformed cases assert the exact diagnostics meander promises.
#include "compiler/weights.hpp"

#include <gtest/gtest.h>
#include <fmt/format.h>
#include <nlohmann/json.hpp>

#include <cmath>
#include <cstdint>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "compiler/load.hpp"
#include "compiler/weights/formats.hpp"
#include "runtime/evaluate.hpp"
#include "test_support.hpp"

namespace fs = std::filesystem;
using namespace meander;

namespace {

const fs::path kData = fs::path(MEANDER_SOURCE_DIR) / "tests" / "data" / "frameworks";

nlohmann::json expected_values() {
    std::ifstream in(kData / "frameworks.json");
    return nlohmann::json::parse(in);
}

// Every tensor of `file` holds exactly PyTorch's values, in PyTorch's order.
void expect_same_as_torch(const std::string& file, const std::string& key_path = "") {
    SCOPED_TRACE(file);
    Diagnostics diags;
    auto set = read_weights((kData / file).string(), diags, key_path);
    ASSERT_TRUE(set) << diags.render();
    const auto want = expected_values()[file];
    ASSERT_EQ(set->tensors.size(), want.size());
    for (const auto& t : set->tensors) {
        SCOPED_TRACE(t.name);
        ASSERT_TRUE(want.contains(t.name));
        EXPECT_EQ(t.shape, want[t.name]["shape"].get<std::vector<std::size_t>>());
        const auto values = want[t.name]["values"].get<std::vector<double>>();
        ASSERT_EQ(t.values.size(), values.size());
        for (std::size_t i = 0; i < values.size(); ++i) EXPECT_EQ(t.values[i], values[i]) << "flat index " << i;
    }
}

std::string errors_of(const std::string& file, const std::string& key_path = "") {
    Diagnostics diags;
    auto set = read_weights((kData / file).string(), diags, key_path);
    EXPECT_FALSE(set);
    return diags.render();
}

std::string le64(std::uint64_t v) {
    std::string out;
    for (int i = 0; i < 8; ++i) out += static_cast<char>((v >> (8 * i)) & 0xff);
    return out;
}

std::string safetensors(const std::string& header, const std::string& data) { return le64(header.size()) + header + data; }

std::string safetensors_error(const std::string& bytes) {
    test::save_fuzz_seed("weights", bytes);
    Diagnostics diags;
    auto set = weights::read_safetensors_bytes(bytes, "m.safetensors", diags);
    EXPECT_FALSE(set);
    return diags.render();
}

}  // namespace

TEST(Checkpoint, PlainStateDictMatchesTorch) { expect_same_as_torch("plain.pt"); }

TEST(Checkpoint, TensorNamesInFileOrder) {
    Diagnostics diags;
    auto set = read_weights((kData / "plain.pt").string(), diags);
    ASSERT_TRUE(set);
    std::vector<std::string> names;
    for (const auto& t : set->tensors) names.push_back(t.name);
    EXPECT_EQ(names, (std::vector<std::string>{"0.weight", "0.bias", "2.weight", "2.bias"}));
    EXPECT_EQ(set->tensors[0].dtype, "float32");
}

TEST(Checkpoint, NestedByKeyPath) { expect_same_as_torch("nested.pt", "model/state_dict"); }

TEST(Checkpoint, ViewsHalfBfloatAndParameters) { expect_same_as_torch("views.pt"); }

TEST(Checkpoint, BigEndianStorages) { expect_same_as_torch("big_endian.pt"); }

TEST(Checkpoint, KeyPathNotThereListsTheKeys) {
    EXPECT_EQ(errors_of("nested.pt", "model/weights"),
              fmt::format("{}: error: key path 'model/weights': no key 'weights' in 'model'; its keys: 'state_dict' (a dictionary)\n",
                          (kData / "nested.pt").string()));
}

TEST(Checkpoint, TopLevelWithoutTensorsAsksForAKeyPath) {
    EXPECT_EQ(errors_of("nested.pt"),
              fmt::format("{}: error: the checkpoint holds no tensors; its keys: 'epoch' (the number 3), 'model' (a dictionary), "
                          "'optimizer' (a dictionary), 'note' (a string) (name the dictionary of tensors with "
                          "'under \"KEY\"' after the weights path)\n",
                          (kData / "nested.pt").string()));
}

TEST(Checkpoint, GlobalOutsideTheAllowedSet) {
    EXPECT_EQ(errors_of("evil_global.pt"),
              fmt::format("{}: error: plain/data.pkl: pickle byte 2: global 'os.system' is outside what a dictionary of "
                          "tensors uses (collections.OrderedDict, torch._utils._rebuild_tensor_v2, "
                          "torch._utils._rebuild_parameter and the torch storage types); meander executes nothing from a checkpoint\n",
                          (kData / "evil_global.pt").string()));
}

TEST(Checkpoint, UnknownOpcode) {
    // Bytes: PROTO 2 (0-1), EMPTY_DICT (2), BINPUT 0 (3-4), MARK (5), BINUNICODE 'a' (6-11), INT at 12.
    EXPECT_EQ(errors_of("odd_opcode.pt"),
              fmt::format("{}: error: plain/data.pkl: pickle byte 12: pickle opcode 0x49 ('I') is not one a dictionary of tensors uses\n",
                          (kData / "odd_opcode.pt").string()));
}

TEST(Checkpoint, StorageFileMissing) {
    EXPECT_EQ(errors_of("no_storage.pt"),
              fmt::format("{}: error: tensor '0.bias': its storage file 'plain/data/1' is missing from the archive\n",
                          (kData / "no_storage.pt").string()));
}

TEST(Checkpoint, NotAZipArchive) {
    Diagnostics diags;
    auto set = weights::read_checkpoint_bytes("hello", "m.pt", "", diags);
    EXPECT_FALSE(set);
    EXPECT_EQ(diags.render(), "m.pt: error: cannot open the checkpoint: not a zip archive\n");
}

TEST(Checkpoint, ViewPastItsStorage) {
    // A view whose strides reach beyond its storage is refused before anything is read.
    const auto* f32 = weights::element_type("FloatStorage");
    std::vector<double> out;
    std::string error;
    std::string storage(48, '\0');
    EXPECT_FALSE(weights::decode_elements(*f32, storage, 2, {4, 3}, {3, 1}, true, out, error));
    EXPECT_EQ(error, "shape (4, 3) with storage offset 2 and strides (3, 1) reaches element 13, past the 12 elements of its storage");
}

TEST(Safetensors, PlainStateDictMatchesTorch) { expect_same_as_torch("plain.safetensors"); }

TEST(Safetensors, HalfBfloatInt) { expect_same_as_torch("views.safetensors"); }

TEST(Safetensors, HalfWidensExactly) {
    // IEEE 754 binary16: 0x3c00 = 1, 0x0001 = 2^-24 (smallest subnormal), 0x7bff = 65504, 0xfc00 = -inf.
    const std::string data("\x00\x3c\x01\x00\xff\x7b\x00\xfc", 8);
    Diagnostics diags;
    auto set = weights::read_safetensors_bytes(
        safetensors(R"({"h":{"dtype":"F16","shape":[4],"data_offsets":[0,8]}})", data), "m.safetensors", diags);
    ASSERT_TRUE(set) << diags.render();
    EXPECT_EQ(set->tensors[0].values, (std::vector<double>{1.0, std::ldexp(1.0, -24), 65504.0, -INFINITY}));
    EXPECT_EQ(set->tensors[0].dtype, "float16");
}

TEST(Safetensors, MalformedInputs) {
    const std::string w = R"("w":{"dtype":"F32","shape":[2],"data_offsets":[0,8]})";
    const std::string zeros8(8, '\0');
    EXPECT_EQ(safetensors_error(le64(1000) + "{}"),
              "m.safetensors: error: safetensors header length 1000 runs past the end of the file (2 bytes follow it)\n");
    EXPECT_EQ(safetensors_error("abc"), "m.safetensors: error: not a safetensors file: 3 bytes, shorter than the 8-byte header length\n");
    EXPECT_EQ(safetensors_error(safetensors("{\"w\": [1,", zeros8)),
              "m.safetensors: error: safetensors header is not JSON (byte 10 of the header)\n");
    // Found by tests/fuzz/weights.cpp: a number past double's range ended the process (an uncaught exception).
    EXPECT_EQ(safetensors_error(safetensors(R"({"w":{"dtype":"F32","shape":[1e999],"data_offsets":[0,8]}})", zeros8)),
              "m.safetensors: error: safetensors header holds a number beyond the range of a double\n");
    EXPECT_EQ(safetensors_error(safetensors(R"({"w":{"dtype":"Q9","shape":[2],"data_offsets":[0,8]}})", zeros8)),
              "m.safetensors: error: tensor 'w': unknown dtype 'Q9' (meander reads F64, F32, F16, BF16, I64, I32, I16, I8, U8 and BOOL)\n");
    EXPECT_EQ(safetensors_error(safetensors(R"({"w":{"dtype":"F32","shape":[3],"data_offsets":[0,8]}})", zeros8)),
              "m.safetensors: error: tensor 'w': shape (3,) of F32 needs 12 bytes, its data_offsets [0, 8] hold 8\n");
    EXPECT_EQ(safetensors_error(safetensors("{" + w + "}", std::string(4, '\0'))),
              "m.safetensors: error: tensor 'w': data_offsets [0, 8] run past the data (4 bytes)\n");
    EXPECT_EQ(safetensors_error(safetensors("{" + w + R"(,"v":{"dtype":"F32","shape":[1],"data_offsets":[4,8]}})", zeros8)),
              "m.safetensors: error: tensors 'w' and 'v' overlap: bytes [0, 8) and [4, 8) of the data\n");
    EXPECT_EQ(safetensors_error(safetensors(R"({"w":{"dtype":"F32","shape":[1],"data_offsets":[4,8]}})", zeros8)),
              "m.safetensors: error: bytes [0, 4) of the data belong to no tensor (a gap before tensor 'w')\n");
    EXPECT_EQ(safetensors_error(safetensors("{" + w + "}", zeros8 + "xx")),
              "m.safetensors: error: bytes [8, 10) of the data belong to no tensor (after the last one)\n");
    EXPECT_EQ(safetensors_error(safetensors(R"({"w":{"dtype":"F32","shape":[2,-1],"data_offsets":[0,8]}})", zeros8)),
              "m.safetensors: error: tensor 'w': shape [2,-1] is not a list of non-negative integers\n");
}

// The nested checkpoint bound through a description (`under`, `from`) gives
// PyTorch's own forward pass (frameworks.json "forward", float64).
TEST(Checkpoint, DescriptionBindsAndAgreesWithTorch) {
    const auto dir = test::scratch_dir("test_framework_weights", "describe");
    const std::string mnd = (dir / "net.mnd").string();
    test::write_text(mnd, fmt::format("model net\nweights \"{}\" under \"model/state_dict\"\ninput x[3]\n"
                                      "dense a: 3 -> 4, tanh, from \"0\"\ndense b: 4 -> 2, from \"2\"\noutput y[2]\n",
                                      (kData / "nested.pt").string()));
    Diagnostics diags;
    auto loaded = load_model(mnd, Precision::float64, diags);
    ASSERT_TRUE(loaded) << diags.render();
    const auto fwd = expected_values()["forward"];
    const auto in = fwd["input"].get<std::vector<double>>();
    const auto want = fwd["output"].get<std::vector<double>>();
    auto r = evaluate(loaded->model, Eigen::Map<const Eigen::VectorXd>(in.data(), 3));
    ASSERT_EQ(r.status, EvalStatus::ok);
    for (int i = 0; i < 2; ++i) EXPECT_NEAR(r.output(i), want[static_cast<std::size_t>(i)], 1e-15);

    // The tensors command lists what the file holds and what binds.
    auto listed = test::run(fmt::format("{} tensors {}", MEANDER_BINARY, mnd));
    EXPECT_EQ(listed.status, 0);
    EXPECT_NE(listed.output.find("name      dtype    shape   min"), std::string::npos) << listed.output;
    EXPECT_NE(listed.output.find("0.weight  float32  [4, 3]"), std::string::npos) << listed.output;
    EXPECT_NE(listed.output.find("4 tensors in"), std::string::npos) << listed.output;
    EXPECT_NE(listed.output.find("; 4 bound by the description"), std::string::npos) << listed.output;

    // A key path on a file that is not a checkpoint is named as such.
    auto other = test::run(fmt::format("{} tensors {} --under model", MEANDER_BINARY, (kData / "plain.safetensors").string()));
    EXPECT_EQ(other.status, 1);
    EXPECT_NE(other.output.find("a key path ('model') selects a dictionary in a PyTorch checkpoint (.pt, .pth); this file is not one"),
              std::string::npos) << other.output;
}
