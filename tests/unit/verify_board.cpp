// `meander verify --board`: the emitted code built with the project's bare-metal
// start-up code and run on qemu's MPS2 boards, compared with eval (the tolerance
// rule; the outside value is the reference evaluator in double) and with the host
// build's output bits.
#include <gtest/gtest.h>

#include <cstdlib>
#include <filesystem>
#include <string>

#include "compiler/load.hpp"
#include "compiler/verify.hpp"
#include "test_support.hpp"

namespace fs = std::filesystem;

namespace {

using Outcome = meander::test::RunResult;
Outcome run(const std::string& args) { return meander::test::run(std::string(MEANDER_BINARY) + " " + args); }

bool have(const char* tool) { return std::system((std::string("command -v ") + tool + " > /dev/null 2>&1").c_str()) == 0; }

const fs::path kSample = fs::path(MEANDER_SOURCE_DIR) / "samples/fan_balance";

std::string args(const std::string& extra) {
    return "verify " + (kSample / "fan_balance.mnd").string() + " --input " + (kSample / "inputs.csv").string() + " " + extra;
}

}  // namespace

TEST(VerifyBoard, AgreesOnTheEmulatedCortexM4F) {
    if (!have("arm-none-eabi-g++") || !have("qemu-system-arm")) GTEST_SKIP() << "cross tools or qemu missing";
    const Outcome r = run(args("--board cortex-m4f"));
    EXPECT_EQ(r.status, 0) << r.output;
    const auto board = r.output.find("on cortex-m4f:");
    ASSERT_NE(board, std::string::npos) << r.output;
    EXPECT_NE(r.output.find("verdict              agrees", board), std::string::npos) << r.output;
    EXPECT_NE(r.output.find("every output equal to the host build's", board), std::string::npos) << r.output;
}

namespace {

// The other boards verify --board offers (each about 6 to 8 s here): the
// Cortex-M3 in software float, the Cortex-M7, and 32-bit ARM Linux under qemu-arm.
void expect_agrees_on(const std::string& board, const char* compiler, const char* emulator) {
    if (!have(compiler) || !have(emulator)) GTEST_SKIP() << compiler << " or " << emulator << " missing";
    const Outcome r = run(args("--board " + board));
    EXPECT_EQ(r.status, 0) << r.output;
    const auto at = r.output.find("on " + board + ":");
    ASSERT_NE(at, std::string::npos) << r.output;
    EXPECT_NE(r.output.find("verdict              agrees", at), std::string::npos) << r.output;
    EXPECT_NE(r.output.find("every output equal to the host build's", at), std::string::npos) << r.output;
}

}  // namespace

TEST(VerifyBoard, AgreesOnTheEmulatedCortexM3) { expect_agrees_on("cortex-m3", "arm-none-eabi-g++", "qemu-system-arm"); }
TEST(VerifyBoard, AgreesOnTheEmulatedCortexM7) { expect_agrees_on("cortex-m7", "arm-none-eabi-g++", "qemu-system-arm"); }
TEST(VerifyBoard, AgreesOnArmLinux) { expect_agrees_on("arm-linux", "arm-linux-gnueabihf-g++", "qemu-arm"); }

TEST(VerifyBoard, ADeviationOnTheBoardIsReported) {
    if (!have("arm-none-eabi-g++") || !have("qemu-system-arm")) GTEST_SKIP() << "cross tools or qemu missing";
    // float32 cannot meet 1e-12: the board's own section must say so, not only the host's.
    const Outcome r = run(args("--board cortex-m4f --tolerance 1e-12"));
    EXPECT_EQ(r.status, 1) << r.output;
    const auto board = r.output.find("on cortex-m4f:");
    ASSERT_NE(board, std::string::npos) << r.output;
    EXPECT_NE(r.output.find("DISAGREES", board), std::string::npos) << r.output;
}

TEST(VerifyBoard, ABareMetalCompilerPointsToTheBoardOption) {
    const Outcome r = run(args("--cxx arm-none-eabi-g++"));
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_NE(r.output.find("--board cortex-m4f"), std::string::npos) << r.output;
}

TEST(VerifyBoard, AMissingEmulatorIsNamed) {
    using namespace meander;
    Diagnostics diags;
    auto loaded = load_model((kSample / "fan_balance.mnd").string(), Precision::float32, diags);
    ASSERT_TRUE(loaded) << diags.render();
    EmitOptions eo;
    VerifyOptions vo;
    vo.board = "cortex-m4f";
    vo.qemu_system = "/nonexistent/qemu-system-arm";
    const std::vector<std::vector<double>> rows(1, std::vector<double>(8, 1.0));
    EXPECT_FALSE(verify_model(loaded->model, eo, rows, vo, diags));
    EXPECT_NE(diags.render().find("needs /nonexistent/qemu-system-arm on PATH"), std::string::npos) << diags.render();
}

TEST(VerifyTipped, ARowWithOtherStepsShowsEvalsErrorNorms) {
    // boiler_ahead in float32: some rows of its 2,000 unlabelled inputs take other adaptive
    // steps than eval (the counters differ; 41 with the kernels of 2026-12-02, none of the 40
    // rows of inputs.csv since then). The report names the row, both evaluation counts, eval's
    // error norms (each accepted attempt below 1, a rejected one at or above: the rule
    // of DEVELOPERS.md "Integrator semantics") and what to do.
    const fs::path s = fs::path(MEANDER_SOURCE_DIR) / "samples/boiler_ahead";
    const Outcome r = run("verify " + (s / "boiler_ahead.mnd").string() + " --input " + (s / "unlabelled.csv").string());
    const auto at = r.output.find("nearest 1: ");
    ASSERT_NE(at, std::string::npos) << r.output;
    const double err = std::strtod(r.output.c_str() + at + 11, nullptr);
    const auto decision = r.output.find('(', r.output.find("h = ", at));
    ASSERT_NE(decision, std::string::npos);
    EXPECT_EQ(r.output.compare(decision + 1, 8, err < 1.0 ? "accepted" : "rejected"), 0) << r.output;
    EXPECT_NE(r.output.find("what to do: emit with --precision float64"), std::string::npos) << r.output;
}
