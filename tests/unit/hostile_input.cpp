// Hostile input, shared folders and crashes mid-write: the cases found by
// trying meander from outside (sanitizers, libFuzzer, hand-made files), each
// kept here so it stays fixed. Expected values are the limits and rules the
// README and DEVELOPERS.md state.
#include <gtest/gtest.h>

#include <fcntl.h>
#include <linux/fs.h>
#include <sys/ioctl.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>
#include <chrono>
#include <cstdio>
#include <filesystem>
#include <regex>
#include <string>
#include <vector>

#include <fmt/format.h>

#include "compiler/parse.hpp"
#include "compiler/source.hpp"
#include "test_support.hpp"

namespace fs = std::filesystem;
using namespace meander;

namespace {

using meander::test::read_text;
using meander::test::write_text;

meander::test::RunResult run(const std::string& args) {
    return meander::test::run(std::string(MEANDER_BINARY) + " " + args);
}

fs::path scratch(const std::string& name) { return meander::test::scratch_dir("hostile-scratch", name); }

const fs::path kSample = fs::path(MEANDER_SOURCE_DIR) / "samples/fan_balance";

// The fan_balance sample under another model name (and optionally another
// first dense layer activation, so two copies emit different code), in `dir`.
fs::path sample_named(const fs::path& dir, const std::string& name, const std::string& act = "tanh") {
    std::string text = read_text(kSample / "fan_balance.mnd");
    text = std::regex_replace(text, std::regex("model fan_balance"), "model " + name);
    text = std::regex_replace(text, std::regex("weights \"fan_balance.npz\""),
                              "weights \"" + (kSample / "fan_balance.npz").string() + "\"");
    text = std::regex_replace(text, std::regex("dense lift: 8 -> 12, tanh"), "dense lift: 8 -> 12, " + act);
    const fs::path mnd = dir / (name.size() > 40 ? std::string("long") : name) ;
    write_text(fs::path(mnd.string() + ".mnd"), text);
    return fs::path(mnd.string() + ".mnd");
}

// The stamp a header defines and the one its source expects.
std::string header_stamp(const std::string& hpp) {
    std::smatch m;
    return std::regex_search(hpp, m, std::regex("_MEANDER_STAMP (0x[0-9a-f]+)")) ? m[1].str() : "none";
}
std::string source_stamp(const std::string& cpp) {
    std::smatch m;
    return std::regex_search(cpp, m, std::regex("_MEANDER_STAMP != (0x[0-9a-f]+)")) ? m[1].str() : "none";
}

std::vector<std::string> listing(const fs::path& dir) {
    std::vector<std::string> names;
    for (const auto& e : fs::directory_iterator(dir)) names.push_back(e.path().filename().string());
    std::sort(names.begin(), names.end());
    return names;
}

// ---- 1. diagnostics stay small ---------------------------------------------

// 100 KB on one line, thousands of errors: each used to print the whole line.
TEST(Diagnostics, ManyErrorsOnOneLongLineStaySmall) {
    std::string text = "model m\n";
    while (text.size() < 100000) text += "dense a: x -> 2 ";
    Source src("long.mnd", text);
    Diagnostics diags;
    const auto start = std::chrono::steady_clock::now();
    parse_description(src, diags);
    const std::string out = diags.render();
    const double seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
    EXPECT_GT(diags.error_count(), 1000);
    EXPECT_EQ(static_cast<int>(diags.all().size()), kMaxDiagnosticsShown);
    EXPECT_EQ(diags.not_shown(), diags.error_count() - kMaxDiagnosticsShown);
    // Each kept diagnostic: a header, a clipped line, a caret line (~300 bytes at most).
    EXPECT_LT(out.size(), static_cast<std::size_t>(kMaxDiagnosticsShown) * 400);
    EXPECT_NE(out.find(std::to_string(diags.not_shown()) + " more errors not shown"), std::string::npos) << out.substr(out.size() - 200);
    EXPECT_LT(seconds, 20.0);  // a guard against the quadratic cost coming back, far above the ~0.1 s it takes
}

TEST(Diagnostics, ALongLineIsClippedAroundTheCaret) {
    std::string line(500, 'a');
    line[300] = '!';
    Source src("m.mnd", line + "\n");
    Diagnostics d;
    d.error(src, Loc{1, 301}, "bad");
    const std::string shown = "..." + line.substr(300 - kLineContext, 2 * kLineContext) + "...";
    EXPECT_EQ(d.render(), "m.mnd:1:301: error: bad\n" + shown + "\n" + std::string(3 + kLineContext, ' ') + "^\n");
}

TEST(Diagnostics, AShortLineIsShownWhole) {
    Source src("m.mnd", "dense a: 2 -> 3\n");
    Diagnostics d;
    d.error(src, Loc{1, 7}, "bad");
    EXPECT_EQ(d.render(), "m.mnd:1:7: error: bad\ndense a: 2 -> 3\n      ^\n");
}

// ---- 8. names are escaped in every diagnostic ----------------------------------

TEST(Diagnostics, ControlCharactersInMessagesAndFileNamesAreEscaped) {
    Diagnostics d;
    d.error("w\x1b[2J.npz", "tensor 'a\nm.mnd:1:1: error: forged' is not used");
    EXPECT_EQ(d.render(), "w\\x1b[2J.npz: error: tensor 'a\\nm.mnd:1:1: error: forged' is not used\n");
}

// ---- 8. escapes in description strings -------------------------------------------

TEST(Strings, ATensorNamedWithAQuoteCanBeNamedAndBound) {
    const fs::path d = scratch("quote-name");
    write_text(d / "m.mnd",
               "model m\nweights \"w.mnw\"\ninput x[1]\n"
               "dense a: 1 -> 1, weight \"say \\\"hi\\\"\", bias \"back\\\\slash\\nline\"\noutput y[1]\n");
    // The weight listing's own escapes (DEVELOPERS.md, "Weight listing") name the same tensors.
    write_text(d / "w.mnw",
               "meander-weights 1\ntensor \"say \\\"hi\\\"\" float32 1 1\n2\n"
               "tensor \"back\\\\slash\\nline\" float32 1\n0.5\n");
    auto r = run("check " + (d / "m.mnd").string());
    EXPECT_EQ(r.status, 0) << r.output;
    write_text(d / "in.csv", "3\n");
    auto e = run("eval " + (d / "m.mnd").string() + " --input " + (d / "in.csv").string());
    EXPECT_EQ(e.status, 0) << e.output;
    EXPECT_NE(e.output.find("6.5"), std::string::npos) << e.output;  // 2 * 3 + 0.5
    // The formatter writes the escapes back, and its output reads the same.
    auto f = run("format " + (d / "m.mnd").string());
    EXPECT_NE(f.output.find("weight \"say \\\"hi\\\"\", bias \"back\\\\slash\\nline\""), std::string::npos) << f.output;
    // In the emitted code the names sit in comments, escaped so that no line break or
    // trailing backslash can end (or continue) the comment.
    auto c = run("compile " + (d / "m.mnd").string() + " -o " + (d / "out").string());
    ASSERT_EQ(c.status, 0) << c.output;
    const std::string cpp = read_text(d / "out/m.cpp");
    EXPECT_NE(cpp.find("tensor \"back\\\\slash\\nline\"\n"), std::string::npos);
}

TEST(Strings, AnUnknownEscapeIsAnError) {
    Source src("m.mnd", "model m\nweights \"C:\\models\\w.npz\"\ninput x[1]\ndense a: 1 -> 1\noutput y[1]\n");
    Diagnostics diags;
    EXPECT_FALSE(parse_description(src, diags));
    EXPECT_EQ(diags.render(),
              "m.mnd:2:12: error: unknown escape in a string: write \\\" for a quote, \\\\ for a backslash, \\n "
              "for a line break\nweights \"C:\\models\\w.npz\"\n           ^\n");
}

// ---- 9. large descriptions are refused before they cost memory ------------------------

TEST(Limits, ADescriptionOverTheSizeLimitIsRefusedUnread) {
    std::string text = "model m\ninput x[1]\n";
    text += std::string(kMaxDescriptionBytes, '#');
    Source src("big.mnd", text);
    Diagnostics diags;
    EXPECT_FALSE(parse_description(src, diags));
    EXPECT_EQ(diags.render(), fmt::format("big.mnd: error: the description is {} bytes long; at most 8388608 (8 MiB) "
                                          "are read\n",
                                          text.size()));
}

TEST(Limits, ParsingStopsPastTheLayerLimit) {
    std::string text = "model m\ninput x[1]\n";
    for (int i = 0; i <= kMaxLayersAndBlocks; ++i) text += fmt::format("dense l{}: 1 -> 1\n", i);
    text += "output y[1]\n";
    Source src("many.mnd", text);
    Diagnostics diags;
    EXPECT_FALSE(parse_description(src, diags));
    EXPECT_EQ(diags.error_count(), 1);
    EXPECT_EQ(diags.render(), fmt::format("many.mnd:{}:1: error: layer 'l65536' is beyond the limit of 65536 layers and "
                                          "blocks in a description; parsing stops here\ndense l65536: 1 -> 1\n^\n",
                                          kMaxLayersAndBlocks + 3));
}

// ---- 2. archives that inflate to gigabytes: tests/unit/weights_limits.cpp -------

// ---- 3. temporary files: unique, created exclusively --------------------------

TEST(Outputs, APlantedLinkAtTheOldTemporaryNameIsNotFollowed) {
    const fs::path d = scratch("planted-link");
    const fs::path mnd = sample_named(d, "fan_balance");
    fs::create_directories(d / "out");
    write_text(d / "victim.txt", "keep me\n");
    fs::create_symlink(d / "victim.txt", d / "out/fan_balance.hpp.meander-tmp");
    fs::create_symlink(d / "victim.txt", d / "out/fan_balance.cpp.meander-tmp");
    auto r = run("compile " + mnd.string() + " -o " + (d / "out").string());
    EXPECT_EQ(r.status, 0) << r.output;
    EXPECT_EQ(read_text(d / "victim.txt"), "keep me\n");
    EXPECT_NE(read_text(d / "out/fan_balance.hpp").find("namespace fan_balance"), std::string::npos);
    EXPECT_TRUE(fs::is_symlink(d / "out/fan_balance.hpp.meander-tmp"));  // left alone, not replaced either
}

TEST(Outputs, TemporariesAreUniqueAndNotLeftBehind) {
    const fs::path d = scratch("no-temporaries");
    Diagnostics diags;
    ASSERT_TRUE(write_files_atomic({{(d / "a.hpp").string(), "a"}, {(d / "a.cpp").string(), "b"}}, diags));
    ASSERT_TRUE(write_files_atomic({{(d / "a.hpp").string(), "c"}, {(d / "a.cpp").string(), "d"}}, diags));
    EXPECT_EQ(listing(d), (std::vector<std::string>{"a.cpp", "a.hpp"}));
    EXPECT_EQ(read_text(d / "a.hpp"), "c");
}

// ---- 6. the old pair or the new pair ---------------------------------------------

int g_renames = 0;
// rename(2), except that the second call fails as an immutable file would make it.
int second_rename_fails(const char* from, const char* to) {
    if (++g_renames == 2) {
        errno = EPERM;
        return -1;
    }
    return std::rename(from, to);
}

TEST(Outputs, ASecondRenameThatFailsPutsTheFirstFileBack) {
    const fs::path d = scratch("second-rename");
    write_text(d / "m.hpp", "old header");
    write_text(d / "m.cpp", "old source");
    Diagnostics diags;
    g_renames = 0;
    set_rename_for_tests(&second_rename_fails);
    const bool ok = write_files_atomic({{(d / "m.hpp").string(), "new header"}, {(d / "m.cpp").string(), "new source"}}, diags);
    set_rename_for_tests(nullptr);
    EXPECT_FALSE(ok);
    EXPECT_EQ(diags.render(), (d / "m.cpp").string() + ": error: cannot write file: Operation not permitted\n");
    EXPECT_EQ(read_text(d / "m.hpp"), "old header");
    EXPECT_EQ(read_text(d / "m.cpp"), "old source");
    EXPECT_EQ(listing(d), (std::vector<std::string>{"m.cpp", "m.hpp"}));
}

TEST(Outputs, ASecondRenameThatFailsRemovesAFirstFileThatIsNew) {
    const fs::path d = scratch("second-rename-new");
    Diagnostics diags;
    g_renames = 0;
    set_rename_for_tests(&second_rename_fails);
    const bool ok = write_files_atomic({{(d / "m.hpp").string(), "new header"}, {(d / "m.cpp").string(), "new source"}}, diags);
    set_rename_for_tests(nullptr);
    EXPECT_FALSE(ok);
    EXPECT_TRUE(listing(d).empty());
}

// The same without the hook: the source is made immutable (FS_IMMUTABLE_FL, what
// `chattr +i` sets), so rename(2) over it really fails with EPERM. Needs
// CAP_LINUX_IMMUTABLE and a file system that keeps the flag (ext4, xfs, btrfs).
struct Immutable {
    fs::path path;
    bool set = false;
    std::string why_not;
    explicit Immutable(fs::path p) : path(std::move(p)) { set = change(true); }
    ~Immutable() {
        if (set) change(false);
    }
    bool change(bool on) {
        const int fd = ::open(path.c_str(), O_RDONLY | O_NONBLOCK);
        if (fd < 0) return why_not = std::strerror(errno), false;
        int flags = 0;
        bool ok = ::ioctl(fd, FS_IOC_GETFLAGS, &flags) == 0;
        if (ok) {
            flags = on ? (flags | FS_IMMUTABLE_FL) : (flags & ~FS_IMMUTABLE_FL);
            ok = ::ioctl(fd, FS_IOC_SETFLAGS, &flags) == 0;
        }
        if (!ok) why_not = std::strerror(errno);
        ::close(fd);
        return ok;
    }
};

TEST(Outputs, AnImmutableSourcePutsTheHeaderBack) {
    const fs::path d = scratch("immutable-source");
    write_text(d / "m.hpp", "old header");
    write_text(d / "m.cpp", "old source");
    Immutable lock(d / "m.cpp");
    if (!lock.set) GTEST_SKIP() << "cannot make a file immutable here (" << lock.why_not << "); the hook test above covers it";
    Diagnostics diags;
    const bool ok = write_files_atomic({{(d / "m.hpp").string(), "new header"}, {(d / "m.cpp").string(), "new source"}}, diags);
    EXPECT_FALSE(ok);
    EXPECT_EQ(diags.render(), (d / "m.cpp").string() + ": error: cannot write file: Operation not permitted\n");
    EXPECT_EQ(read_text(d / "m.hpp"), "old header");
    EXPECT_EQ(read_text(d / "m.cpp"), "old source");
    EXPECT_EQ(listing(d), (std::vector<std::string>{"m.cpp", "m.hpp"}));
}

TEST(Outputs, AnImmutableSourceRemovesAHeaderThatIsNew) {
    const fs::path d = scratch("immutable-source-new");
    write_text(d / "m.cpp", "old source");
    Immutable lock(d / "m.cpp");
    if (!lock.set) GTEST_SKIP() << "cannot make a file immutable here (" << lock.why_not << "); the hook test above covers it";
    Diagnostics diags;
    EXPECT_FALSE(write_files_atomic({{(d / "m.hpp").string(), "new header"}, {(d / "m.cpp").string(), "new source"}}, diags));
    EXPECT_EQ(read_text(d / "m.cpp"), "old source");
    EXPECT_EQ(listing(d), (std::vector<std::string>{"m.cpp"}));
}

// ---- 7. concurrent compiles into one folder -------------------------------------

TEST(Outputs, ConcurrentCompilesIntoOneFolderLeaveAMatchingPair) {
    const fs::path d = scratch("concurrent");
    const fs::path a = sample_named(d, "fan_balance");
    fs::create_directories(d / "b");
    const fs::path b = sample_named(d / "b", "fan_balance", "relu");  // same files, other code
    const std::string out = (d / "out").string();
    for (int round = 0; round < 10; ++round) {
        // Eight compiles at once, four of each description; all must succeed.
        std::string script = "fail=0; pids=''; ";
        for (int i = 0; i < 8; ++i)
            script += std::string(MEANDER_BINARY) + " compile " + (i % 2 ? a : b).string() + " -o " + out + " 2>&1 & pids=\"$pids $!\"; ";
        script += "for p in $pids; do wait $p || fail=1; done; exit $fail";
        auto r = meander::test::run("sh -c '" + script + "'");
        ASSERT_EQ(r.status, 0) << r.output;
        const std::string hpp = read_text(d / "out/fan_balance.hpp"), cpp = read_text(d / "out/fan_balance.cpp");
        ASSERT_EQ(header_stamp(hpp), source_stamp(cpp)) << "round " << round;
        ASSERT_NE(header_stamp(hpp), "none");
        ASSERT_EQ(listing(d / "out"), (std::vector<std::string>{"fan_balance.cpp", "fan_balance.hpp"}));
    }
}

// ---- 4. and 5. model names that would break the build or the file system -------

std::string check_named(const std::string& name) {
    const fs::path d = scratch("name-" + name.substr(0, 20));
    auto r = run("check " + sample_named(d, name).string());
    return std::to_string(r.status) + " " + r.output;
}

TEST(Names, MacrosPredefinedByCompilersAreRefused) {
    // GCC 12 and Clang 14 define these under -std=gnu++17 (checked with -dM -E).
    for (const std::string n : {"linux", "unix", "i386"}) {
        const std::string out = check_named(n);
        EXPECT_EQ(out.substr(0, 2), "1 ") << out;
        EXPECT_NE(out.find("model name '" + n + "' cannot be used"), std::string::npos) << out;
        EXPECT_NE(out.find("is a macro predefined by GCC and Clang"), std::string::npos) << out;
    }
}

TEST(Names, MacrosOfTheCLibraryAreRefused) {
    const std::pair<const char*, const char*> cases[] = {
        {"errno", "<cerrno>"}, {"stdin", "<cstdio>"}, {"assert", "<cassert>"}, {"EINVAL", "<cerrno>"},
        {"SIGINT", "<csignal>"}, {"LC_ALL", "<clocale>"}, {"FLT_MAX", "<cfloat>"}, {"PRId32", "<cinttypes>"},
    };
    for (const auto& [n, header] : cases) {
        const std::string out = check_named(n);
        EXPECT_EQ(out.substr(0, 2), "1 ") << out;
        EXPECT_NE(out.find(fmt::format("is a macro of the C library ({})", header)), std::string::npos) << out;
    }
    EXPECT_EQ(check_named("ECG_filter").substr(0, 2), "0 ");  // only the names that exist, not the whole E family
}

TEST(Names, AModelNameTooLongForAFileNameIsRefusedWithItsPosition) {
    const std::string name = "m" + std::string(239, 'x');
    const fs::path d = scratch("long-name");
    const fs::path mnd = sample_named(d, name);
    auto r = run("check " + mnd.string());
    EXPECT_EQ(r.status, 1);
    EXPECT_NE(r.output.find(mnd.string() + ":14:7: error: model name 'mxxxxxxxxxxxxxxx...' is 240 characters long; "
                                           "names must be at most 128"),
              std::string::npos)
        << r.output;
    auto c = run("compile " + mnd.string() + " -o " + (d / "new/out").string());
    EXPECT_EQ(c.status, 1);
    EXPECT_FALSE(fs::exists(d / "new"));  // no empty folder left behind
    EXPECT_EQ(check_named("m" + std::string(127, 'x')).substr(0, 2), "0 ");
}

// ---- 10. usage errors and where a weights file was named --------------------------

TEST(ExitCodes, AnEmptyOutputFolderIsAUsageError) {
    auto r = run("compile " + (kSample / "fan_balance.mnd").string() + " -o ''");
    EXPECT_EQ(r.status, 2) << r.output;
    auto e = run("eval " + (kSample / "fan_balance.mnd").string() + " --input " + (kSample / "inputs.csv").string() +
                 " --output ''");
    EXPECT_EQ(e.status, 2) << e.output;
}

TEST(Weights, AnErrorInTheWeightsFileNamesTheWeightsLine) {
    const fs::path d = scratch("weights-line");
    write_text(d / "m.mnd", "model m\n\nweights \"w.npz\"\ninput x[2]\ndense a: 2 -> 2\noutput y[2]\n");
    write_text(d / "w.npz", "not a zip archive");
    auto r = run("check " + (d / "m.mnd").string());
    EXPECT_EQ(r.status, 1);
    EXPECT_NE(r.output.find((d / "m.mnd").string() + ":3:9: note: the weights file '" + (d / "w.npz").string() +
                            "' is named here\nweights \"w.npz\"\n        ^\n"),
              std::string::npos)
        << r.output;
}

}  // namespace
