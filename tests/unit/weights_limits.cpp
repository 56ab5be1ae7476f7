// Limits on what a weights file may bring into memory (README, "Limits"):
// 256 MiB for any file, and given a description, what its layers bind times
// kWeightsSlack at 8 bytes a value plus kWeightsAllowance. Value counts are
// counted by hand from the descriptions below, with PyTorch's documented
// shapes: Linear (out, in) and (out,), GRUCell weight_ih (3H, IN),
// weight_hh (3H, H), bias_ih and bias_hh (3H,).
#include <gtest/gtest.h>

#include <sys/resource.h>
#include <sys/wait.h>
#include <unistd.h>
#include <zlib.h>

#include <cstdint>
#include <cstdlib>
#include <filesystem>
#include <string>
#include <vector>

#include <fmt/format.h>

#include "compiler/check.hpp"
#include "compiler/load.hpp"
#include "compiler/npz_writer.hpp"
#include "compiler/parse.hpp"
#include "compiler/weights.hpp"
#include "compiler/weights/formats.hpp"
#include "test_support.hpp"

#if defined(__SANITIZE_ADDRESS__)
#define MEANDER_ASAN 1
#elif defined(__has_feature)
#if __has_feature(address_sanitizer)
#define MEANDER_ASAN 1
#endif
#endif

namespace fs = std::filesystem;
using namespace meander;

namespace {

using test::read_text;
using test::write_text;

fs::path scratch(const std::string& name) { return test::scratch_dir("weights-limits", name); }

std::string replace_all(std::string s, const std::string& from, const std::string& to) {
    for (std::size_t at = s.find(from); at != std::string::npos; at = s.find(from, at + to.size()))
        s.replace(at, from.size(), to);
    return s;
}

// Sets an environment variable for one scope.
struct ScopedEnv {
    std::string name;
    ScopedEnv(std::string n, const std::string& value) : name(std::move(n)) { setenv(name.c_str(), value.c_str(), 1); }
    ~ScopedEnv() { unsetenv(name.c_str()); }
};

Model parsed(const std::string& text) {
    Source src("m.mnd", text);
    Diagnostics diags;
    auto m = parse_description(src, diags);
    EXPECT_TRUE(m && check_model(*m, src, CheckOptions{}, diags)) << diags.render();
    return m ? *m : Model{};
}

std::string le(std::uint64_t v, int n) {
    std::string out;
    for (int i = 0; i < n; ++i) out += static_cast<char>((v >> (8 * i)) & 0xff);
    return out;
}

// A .npy v1.0 header for `count` little-endian float32 values, padded to 128 bytes (NEP 1).
std::string npy_header(std::uint64_t count) {
    std::string h = fmt::format("{{'descr': '<f4', 'fortran_order': False, 'shape': ({},), }}", count);
    while ((10 + h.size() + 1) % 128 != 0) h += ' ';
    return "\x93NUMPY\x01" + std::string(1, '\0') + le(h.size() + 1, 2) + h + "\n";
}

// One deflated member: a .npy of `count` zero float32 values, compressed by zlib
// in 1 MiB pieces, so neither the test nor the archive holds the inflated bytes.
struct Deflated {
    std::string data;            // raw deflate stream
    std::uint32_t crc = 0;
    std::uint64_t size = 0;      // inflated
};

Deflated deflated_zeros_npy(std::uint64_t count) {
    Deflated d;
    z_stream zs{};
    EXPECT_EQ(deflateInit2(&zs, 9, Z_DEFLATED, -15, 9, Z_DEFAULT_STRATEGY), Z_OK);
    std::string out(1 << 16, '\0');
    auto feed = [&](const std::string& piece, int flush) {
        zs.next_in = reinterpret_cast<Bytef*>(const_cast<char*>(piece.data()));
        zs.avail_in = static_cast<uInt>(piece.size());
        d.crc = static_cast<std::uint32_t>(crc32(d.crc, reinterpret_cast<const Bytef*>(piece.data()), static_cast<uInt>(piece.size())));
        d.size += piece.size();
        do {
            zs.next_out = reinterpret_cast<Bytef*>(out.data());
            zs.avail_out = static_cast<uInt>(out.size());
            deflate(&zs, flush);
            d.data.append(out.data(), out.size() - zs.avail_out);
        } while (zs.avail_out == 0);
    };
    feed(npy_header(count), Z_NO_FLUSH);
    const std::string mib(1 << 20, '\0');
    std::uint64_t left = count * 4;
    while (left > 0) {
        const std::uint64_t n = std::min<std::uint64_t>(left, mib.size());
        left -= n;
        feed(n == mib.size() ? mib : std::string(n, '\0'), left == 0 ? Z_FINISH : Z_NO_FLUSH);
    }
    deflateEnd(&zs);
    return d;
}

// A zip archive (APPNOTE 6.3.x: local headers, central directory, end record)
// of the same deflated member under each name.
std::string zip_of(const Deflated& m, const std::vector<std::string>& names) {
    std::string out, dir;
    for (const auto& name : names) {
        const std::uint64_t at = out.size();
        const std::string common = le(20, 2) + le(0, 2) + le(8, 2) + le(0, 2) + le(0x21, 2) + le(m.crc, 4) +
                                   le(m.data.size(), 4) + le(m.size, 4) + le(name.size(), 2) + le(0, 2);
        out += le(0x04034b50, 4) + common + name + m.data;
        dir += le(0x02014b50, 4) + le(20, 2) + common + le(0, 2) + le(0, 2) + le(0, 2) + le(0, 4) + le(at, 4) + name;
    }
    const std::uint64_t dir_at = out.size();
    out += dir + le(0x06054b50, 4) + le(0, 2) + le(0, 2) + le(names.size(), 2) + le(names.size(), 2) + le(dir.size(), 4) +
           le(dir_at, 4) + le(0, 2);
    return out;
}

// Eight members of 64 Mi - 32 zero float32 values: 256 MiB each with the
// 128-byte header, 2 GiB in all, about 2 MB on disk (finding 2 of issue 7).
const fs::path& zip_bomb() {
    static const fs::path p = [] {
        // One per test process: ctest runs the tests that use it in parallel.
        const fs::path dir = scratch("bomb-" + std::to_string(getpid()));
        const Deflated m = deflated_zeros_npy((std::uint64_t{64} << 20) - 32);
        EXPECT_EQ(m.size, std::uint64_t{256} << 20);
        std::vector<std::string> names;
        for (int i = 0; i < 8; ++i) names.push_back(fmt::format("w{}.npy", i));
        write_text(dir / "w.npz", zip_of(m, names));
        return dir / "w.npz";
    }();
    return p;
}

const fs::path kSamples = fs::path(MEANDER_SOURCE_DIR) / "samples";

// fan_balance binds 1082 values: lift 12*8+12, f1 16*(14+1)+16, f2 14*16+14,
// r1 and r2 14*14+14 each, head 4*14+4.
const std::uint64_t kFanBalanceLimit = 1082 * 8 * 4 + (std::uint64_t{4} << 20);

struct ChildRun {
    std::string diagnostics;
    long max_rss_kib = 0;
    bool refused = false;
};

// Reads `path` in a child process (for `model`, if given) and reports its
// diagnostics and its peak resident memory (getrusage through wait4).
ChildRun read_in_child(const fs::path& path, const Model* model) {
    // Named by this process: ctest runs the tests that share the archive in parallel.
    const fs::path out = path.parent_path() / ("child-" + std::to_string(getpid()) + ".txt");
    fs::remove(out);
    const pid_t pid = fork();
    if (pid == 0) {
#ifndef MEANDER_ASAN
        // A reader that inflated everything would stop here, not take the machine
        // (AddressSanitizer reserves more address space than this, so not under it).
        rlimit as{std::uint64_t{1} << 31, std::uint64_t{1} << 31};
        setrlimit(RLIMIT_AS, &as);
#endif
        Diagnostics diags;
        const bool loaded = read_weights(path.string(), diags, "", model).has_value();
        write_text(out, diags.render());
        _exit(loaded ? 1 : 0);
    }
    int status = 0;
    rusage ru{};
    EXPECT_EQ(wait4(pid, &status, 0, &ru), pid);
    ChildRun r;
    r.refused = WIFEXITED(status) && WEXITSTATUS(status) == 0;
    r.max_rss_kib = ru.ru_maxrss;
    r.diagnostics = read_text(out);
    return r;
}

// ---- what a description binds: every layer kind ------------------------------

TEST(BoundValues, DenseResidualAndContinuous) {
    const Model m = parsed(
        "model c\ninput x[3]\n"
        "dense lift: 3 -> 5, tanh\n"                                      // 5*3+5 = 20
        "residual r: 5 {\n  dense r1: 5 -> 5, tanh, no-bias\n}\n"          // 25
        "continuous c: 5, t in [0, 1] {\n  augment 1\n"
        "  dense f: 6 + t -> 6, tanh\n  solver rk4, steps 4\n}\n"          // 6*7+6 = 48
        "dense out: 6 -> 1\noutput y[1]\n");                               // 7
    EXPECT_EQ(bound_values(m), 20u + 25u + 48u + 7u);
}

TEST(BoundValues, StreamingEvolutionGatedUpdateAndReadout) {
    const Model m = parsed(
        "model a\ninput x[3]\nstate h[8], largest-gap 4\n"
        "continuous drift: 8, t in [0, gap] {\n"
        "  dense f1: 8 -> 16, tanh\n"                                     // 16*8+16 = 144
        "  dense f2: 16 -> 8\n"                                           // 8*16+8 = 136
        "  solver rk4, steps-per-unit 8\n}\n"
        "gated cell: 3 -> 8\n"                                            // 24*3+24 + 24*8+24 = 312
        "dense head: 8 -> 2\n"                                            // 18
        "output y[2]\n");
    EXPECT_EQ(bound_values(m), 144u + 136u + 312u + 18u);
}

TEST(BoundValues, StreamingBlendAndMerge) {
    const Model m = parsed(
        "model b\ninput x[2]\nstate h[4], largest-gap 0.5\n"
        "blend cell: 4 {\n"
        "  dense b1: 4 -> 8, tanh\n"                                      // 40
        "  dense rate: 8 -> 4\n  dense start: 8 -> 4, tanh\n  dense end: 8 -> 4, tanh\n}\n"  // 3*36
        "merge u: 4 + 2 -> 4, tanh\n"                                     // 4*6+4 = 28
        "output y[4]\n");
    EXPECT_EQ(bound_values(m), 40u + 108u + 28u);
}

TEST(WeightsLimit, FromTheDescriptionWithItsBasis) {
    Diagnostics diags;
    const Model m = parsed(read_text(kSamples / "fan_balance/fan_balance.mnd"));
    const auto limit = weights_limit(&m, diags);
    ASSERT_TRUE(limit);
    EXPECT_EQ(limit->bytes, kFanBalanceLimit);
    EXPECT_EQ(limit->basis, "what model 'fan_balance' binds: 1082 values, 8 bytes each, times 4, plus 4 MiB; "
                            "set MEANDER_WEIGHTS_LIMIT_MIB to raise it");
    const auto none = weights_limit(nullptr, diags);
    ASSERT_TRUE(none);
    EXPECT_EQ(none->bytes, std::uint64_t{256} << 20);
}

TEST(WeightsLimit, TheVariableReplacesItAndIsChecked) {
    const Model m = parsed(read_text(kSamples / "fan_balance/fan_balance.mnd"));
    {
        ScopedEnv env("MEANDER_WEIGHTS_LIMIT_MIB", "1024");
        Diagnostics diags;
        const auto limit = weights_limit(&m, diags);
        ASSERT_TRUE(limit);
        EXPECT_EQ(limit->bytes, std::uint64_t{1} << 30);
        EXPECT_EQ(limit->basis, "MEANDER_WEIGHTS_LIMIT_MIB=1024");
    }
    for (const char* bad : {"", "0", "-1", "12k", "1048577", " 5"}) {
        ScopedEnv env("MEANDER_WEIGHTS_LIMIT_MIB", bad);
        Diagnostics diags;
        EXPECT_FALSE(weights_limit(&m, diags)) << bad;
        EXPECT_EQ(diags.render(), fmt::format("MEANDER_WEIGHTS_LIMIT_MIB: error: the environment variable is '{}': "
                                              "expected a whole number of MiB from 1 to 1048576\n", bad));
    }
}

// ---- finding 2: a small archive that inflates to gigabytes --------------------

TEST(ZipBomb, RefusedBeforeInflatingWithoutADescription) {
    const fs::path& bomb = zip_bomb();
    EXPECT_LT(fs::file_size(bomb), 2500000u);
    const ChildRun r = read_in_child(bomb, nullptr);
    EXPECT_TRUE(r.refused);
    EXPECT_EQ(replace_all(r.diagnostics, bomb.string(), "W"),
              "W: error: member 'w1.npy' would bring the archive's inflated size to 536870912 bytes, beyond the limit "
              "of 268435456 bytes (256 MiB, meander's limit for a weights file; set MEANDER_WEIGHTS_LIMIT_MIB to raise "
              "it); nothing was inflated\n");
    // Nothing was inflated: the reader's whole process stays far below one member (256 MiB).
    // (Not under AddressSanitizer: its shadow memory counts in the RSS; the plain build checks it.)
#ifndef MEANDER_ASAN
    EXPECT_LT(r.max_rss_kib, 128 * 1024);
#endif
}

TEST(ZipBomb, RefusedAtTheFirstMemberForADescription) {
    const fs::path& bomb = zip_bomb();
    const Model m = parsed(read_text(kSamples / "fan_balance/fan_balance.mnd"));
    const ChildRun r = read_in_child(bomb, &m);
    EXPECT_TRUE(r.refused);
    EXPECT_EQ(replace_all(r.diagnostics, bomb.string(), "W"),
              fmt::format("W: error: member 'w0.npy' would bring the archive's inflated size to 268435456 bytes, beyond "
                          "the limit of {} bytes (what model 'fan_balance' binds: 1082 values, 8 bytes each, times 4, "
                          "plus 4 MiB; set MEANDER_WEIGHTS_LIMIT_MIB to raise it); nothing was inflated\n",
                          kFanBalanceLimit));
#ifndef MEANDER_ASAN
    EXPECT_LT(r.max_rss_kib, 128 * 1024);
#endif
}

TEST(ZipBomb, TheCommandLineNamesTheFileAndTheWeightsLine) {
    const fs::path dir = scratch("bomb-cli");
    std::string text = read_text(kSamples / "fan_balance/fan_balance.mnd");
    text = replace_all(text, "weights \"fan_balance.npz\"", "weights \"" + zip_bomb().string() + "\"");
    write_text(dir / "m.mnd", text);
    const auto r = test::run(std::string(MEANDER_BINARY) + " check " + (dir / "m.mnd").string());
    EXPECT_EQ(r.status, 1);
    EXPECT_NE(r.output.find("member 'w0.npy' would bring the archive's inflated size to 268435456 bytes"), std::string::npos)
        << r.output;
    EXPECT_NE(r.output.find("note: the weights file"), std::string::npos) << r.output;
}

// ---- the limit from the description, and the variable that raises it -------------

// fan_balance's own tensors plus one extra member of 8 MiB of zeros, stored:
// within 256 MiB, beyond what the description binds.
fs::path padded_fan_balance(const fs::path& dir) {
    Diagnostics diags;
    auto set = read_weights((kSamples / "fan_balance/fan_balance.npz").string(), diags);
    EXPECT_TRUE(set) << diags.render();
    Tensor pad;
    pad.name = "pad";
    pad.dtype = "float32";
    pad.shape = {std::size_t{2} << 20};
    pad.values.assign(pad.shape[0], 0.0);
    set->tensors.push_back(pad);
    write_text(dir / "w.npz", *npz_bytes(*set, "float32"));
    std::string text = read_text(kSamples / "fan_balance/fan_balance.mnd");
    write_text(dir / "m.mnd", replace_all(text, "weights \"fan_balance.npz\"", "weights \"w.npz\""));
    return dir / "m.mnd";
}

TEST(DescriptionLimit, AnArchiveBeyondWhatTheDescriptionBindsIsRefused) {
    const fs::path mnd = padded_fan_balance(scratch("padded"));
    const auto r = test::run(std::string(MEANDER_BINARY) + " check " + mnd.string());
    EXPECT_EQ(r.status, 1);
    // npz_bytes stores its members, so the file's own size is past the limit: it is not read.
    EXPECT_NE(r.output.find(fmt::format("w.npz: error: {} bytes of weights, beyond the limit of {} bytes (what model "
                                        "'fan_balance' binds: 1082 values, 8 bytes each, times 4, plus 4 MiB; set "
                                        "MEANDER_WEIGHTS_LIMIT_MIB to raise it); nothing was read\n",
                                        fs::file_size(mnd.parent_path() / "w.npz"), kFanBalanceLimit)),
              std::string::npos)
        << r.output;
    // Raised, the archive is read, and binding finds the extra tensor.
    const auto raised = test::run("MEANDER_WEIGHTS_LIMIT_MIB=16 " + std::string(MEANDER_BINARY) + " check " + mnd.string());
    EXPECT_EQ(raised.status, 1);
    EXPECT_NE(raised.output.find("error: tensor 'pad' in "), std::string::npos) << raised.output;
    EXPECT_EQ(raised.output.find("beyond the limit"), std::string::npos) << raised.output;
}

TEST(DescriptionLimit, EverySamplesWeightsLoad) {
    int samples = 0;
    for (const auto& e : fs::directory_iterator(kSamples)) {
        if (!e.is_directory()) continue;
        for (const auto& f : fs::directory_iterator(e.path())) {
            if (f.path().extension() != ".mnd") continue;
            ++samples;
            Diagnostics diags;
            EXPECT_TRUE(load_model(f.path().string(), Precision::float32, diags)) << f.path() << "\n" << diags.render();
        }
    }
    EXPECT_GE(samples, 4);  // boiler_ahead, fan_balance, parcel_chill (streaming), soil_probe
}

// A streaming model whose weights are almost all in one layer kind, stored in
// float64: beyond the fixed allowance, within the limit only when that kind is counted.
struct HeavyCase {
    const char* name;
    const char* description;
    std::vector<std::pair<std::string, std::vector<std::size_t>>> tensors;
};

const HeavyCase heavy_cases[] = {
    {"gated",
     "model g\nweights \"w.npz\"\ninput x[1]\nstate h[512], largest-gap 1\n"
     "continuous e: 512, t in [0, gap] {\n  dense f1: 512 -> 1, tanh\n  dense f2: 1 -> 512\n  solver euler, steps-per-unit 1\n}\n"
     "gated cell: 1 -> 512\noutput y[512]\n",
     {{"f1.weight", {1, 512}}, {"f1.bias", {1}}, {"f2.weight", {512, 1}}, {"f2.bias", {512}},
      {"cell.weight_ih", {1536, 1}}, {"cell.weight_hh", {1536, 512}}, {"cell.bias_ih", {1536}}, {"cell.bias_hh", {1536}}}},
    {"merge",
     "model u\nweights \"w.npz\"\ninput x[1]\nstate h[800], largest-gap 1\n"
     "continuous e: 800, t in [0, gap] {\n  dense f1: 800 -> 1, tanh\n  dense f2: 1 -> 800\n  solver euler, steps-per-unit 1\n}\n"
     "merge m: 800 + 1 -> 800, tanh\noutput y[800]\n",
     {{"f1.weight", {1, 800}}, {"f1.bias", {1}}, {"f2.weight", {800, 1}}, {"f2.bias", {800}},
      {"m.weight", {800, 801}}, {"m.bias", {800}}}},
    {"evolution",
     "model e\nweights \"w.npz\"\ninput x[1]\nstate h[800], largest-gap 1\n"
     "continuous c: 800, t in [0, gap] {\n  dense f: 800 -> 800, tanh\n  solver euler, steps-per-unit 1\n}\n"
     "merge m: 800 + 1 -> 800, tanh\noutput y[800]\n",
     {{"f.weight", {800, 800}}, {"f.bias", {800}}, {"m.weight", {800, 801}}, {"m.bias", {800}}}},
    {"blend",
     "model b\nweights \"w.npz\"\ninput x[1]\nstate h[4], largest-gap 1\n"
     "blend cell: 4 {\n  dense b1: 4 -> 800, tanh\n  dense b2: 800 -> 800, tanh\n  dense rate: 800 -> 4\n"
     "  dense start: 800 -> 4, tanh\n  dense end: 800 -> 4, tanh\n}\nmerge m: 4 + 1 -> 4, tanh\noutput y[4]\n",
     {{"b1.weight", {800, 4}}, {"b1.bias", {800}}, {"b2.weight", {800, 800}}, {"b2.bias", {800}}, {"rate.weight", {4, 800}},
      {"rate.bias", {4}}, {"start.weight", {4, 800}}, {"start.bias", {4}}, {"end.weight", {4, 800}}, {"end.bias", {4}},
      {"m.weight", {4, 5}}, {"m.bias", {4}}}},
    {"readout",
     "model r\nweights \"w.npz\"\ninput x[1]\nstate h[4], largest-gap 1\n"
     "continuous e: 4, t in [0, gap] {\n  dense f: 4 -> 4, tanh\n  solver euler, steps-per-unit 1\n}\n"
     "merge m: 4 + 1 -> 4, tanh\n"
     "dense wide: 4 -> 900, tanh\ndense back: 900 -> 900\ndense out: 900 -> 1\noutput y[1]\n",
     {{"f.weight", {4, 4}}, {"f.bias", {4}}, {"m.weight", {4, 5}}, {"m.bias", {4}}, {"wide.weight", {900, 4}}, {"wide.bias", {900}}, {"back.weight", {900, 900}},
      {"back.bias", {900}}, {"out.weight", {1, 900}}, {"out.bias", {1}}}},
};

class Heavy : public testing::TestWithParam<HeavyCase> {};

TEST_P(Heavy, WeightsLoad) {
    const HeavyCase& c = GetParam();
    const fs::path dir = scratch(std::string("heavy-") + c.name);
    write_text(dir / "m.mnd", c.description);
    TensorSet set;
    std::uint64_t values = 0;
    for (const auto& [name, shape] : c.tensors) {
        Tensor t;
        t.name = name;
        t.dtype = "float64";
        t.shape = shape;
        std::size_t n = 1;
        for (auto d : shape) n *= d;
        t.values.assign(n, 0.001);
        values += n;
        set.tensors.push_back(std::move(t));
    }
    ASSERT_GT(values * 8, std::uint64_t{4} << 20) << "the case must pass the allowance";
    write_text(dir / "w.npz", *npz_bytes(set, "float64"));
    Diagnostics diags;
    EXPECT_TRUE(load_model((dir / "m.mnd").string(), Precision::float64, diags)) << diags.render();
}

INSTANTIATE_TEST_SUITE_P(Streaming, Heavy, testing::ValuesIn(heavy_cases),
                         [](const testing::TestParamInfo<HeavyCase>& i) { return std::string(i.param.name); });

}  // namespace
