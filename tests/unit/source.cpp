// Source positions, diagnostic rendering, CSV rows, atomic writes.
#include <gtest/gtest.h>

#include <filesystem>
#include <fstream>

#include "compiler/source.hpp"

namespace fs = std::filesystem;
using namespace meander;

TEST(Source, LineAndColumnOfOffsets) {
    Source s("m.mnd", "model a\n\n  dense x\r\nlast");
    EXPECT_EQ(s.loc_of(0).line, 1);
    EXPECT_EQ(s.loc_of(6).col, 7);
    EXPECT_EQ(s.loc_of(8).line, 2);
    EXPECT_EQ(s.loc_of(11).line, 3);
    EXPECT_EQ(s.loc_of(11).col, 3);
    EXPECT_EQ(s.line_text(3), "  dense x");  // the carriage return is not part of the line
    EXPECT_EQ(s.line_text(4), "last");
    EXPECT_EQ(s.line_text(5), "");
}

TEST(Diagnostics, RendersFileLineColumnLineAndCaret) {
    Source s("m.mnd", "model a\n\tdense  x: 2 -> 3\n");
    Diagnostics d;
    d.error(s, Loc{2, 9}, "something is wrong");
    d.warning(s, Loc{1, 1}, "a warning");
    d.error("w.npz", "no position here");
    EXPECT_EQ(d.error_count(), 2);
    EXPECT_EQ(d.render(),
              "m.mnd:2:9: error: something is wrong\n"
              "\tdense  x: 2 -> 3\n"
              "\t       ^\n"  // the tab is kept so the caret lines up at any tab width
              "m.mnd:1:1: warning: a warning\n"
              "model a\n"
              "^\n"
              "w.npz: error: no position here\n");
}

TEST(Csv, ReadsRowsWithHeaderAndComments) {
    fs::path p = fs::temp_directory_path() / "meander-source-test.csv";
    std::ofstream(p) << "a,b\n# a comment\n1, 2.5\n\n-3e-2,4\n";
    Diagnostics d;
    auto rows = read_csv_rows(p.string(), 2, d);
    ASSERT_TRUE(rows) << d.render();
    ASSERT_EQ(rows->size(), 2u);
    EXPECT_EQ((*rows)[0][1], 2.5);
    EXPECT_EQ((*rows)[1][0], -0.03);
    fs::remove(p);
}

TEST(Csv, BadValueHasPosition) {
    fs::path p = fs::temp_directory_path() / "meander-source-bad.csv";
    std::ofstream(p) << "1,2\n3,x4\n5\n";
    Diagnostics d;
    EXPECT_FALSE(read_csv_rows(p.string(), 2, d));
    std::string file = p.string();
    EXPECT_EQ(d.render(), file + ":2:3: error: expected a number in column 2, not 'x4'\n3,x4\n  ^\n" + file +
                              ":3:1: error: row has 1 value, expected 2\n5\n^\n");
    fs::remove(p);
}

TEST(AtomicWrite, ReplacesWholeFileAndLeavesNoTemporary) {
    fs::path dir = fs::temp_directory_path() / "meander-atomic";
    fs::remove_all(dir);
    fs::create_directories(dir);
    Diagnostics d;
    ASSERT_TRUE(write_file_atomic((dir / "f.txt").string(), "one", d));
    ASSERT_TRUE(write_file_atomic((dir / "f.txt").string(), "two", d));
    std::ifstream in(dir / "f.txt");
    std::string text;
    std::getline(in, text);
    EXPECT_EQ(text, "two");
    int n = 0;
    for ([[maybe_unused]] auto& e : fs::directory_iterator(dir)) ++n;
    EXPECT_EQ(n, 1);
    EXPECT_FALSE(write_file_atomic((dir / "missing" / "f.txt").string(), "x", d));
    EXPECT_EQ(d.error_count(), 1);
    fs::remove_all(dir);
}

// FNV-1a 64 test vectors of the algorithm's published reference (Fowler, Noll, Vo; from memory),
// confirmed here with an independent Python implementation.
TEST(Hash, Fnv1a64KnownValues) {
    EXPECT_EQ(fnv1a64(""), 0xcbf29ce484222325ULL);
    EXPECT_EQ(fnv1a64("a"), 0xaf63dc4c8601ec8cULL);
    EXPECT_EQ(fnv1a64("foobar"), 0x85944171f73967e8ULL);
}

TEST(Numbers, ShortestRoundTrip) {
    EXPECT_EQ(format_double(0.1), "0.1");
    EXPECT_EQ(format_float(0.1f), "0.1");
    EXPECT_EQ(std::stod(format_double(1.0 / 3.0)), 1.0 / 3.0);
    EXPECT_EQ(std::stof(format_float(1.0f / 3.0f)), 1.0f / 3.0f);
}

TEST(Csv, AFirstRowWithATypoIsNoHeader) {
    // A header holds names only; "0.1,O.2" (a letter O) is a mistyped data row.
    fs::path p = fs::temp_directory_path() / "meander-source-typo.csv";
    std::ofstream(p) << "0.1,O.2\n1,2\n";
    Diagnostics d;
    EXPECT_FALSE(read_csv_rows(p.string(), 2, d));
    EXPECT_EQ(d.render(), p.string() + ":1:5: error: expected a number in column 2, not 'O.2'\n0.1,O.2\n    ^\n");
    fs::remove(p);
}

TEST(Diagnostics, ControlCharactersInTheLineAreShownAsQuestionMarks) {
    Source s("m.mnd", std::string("dense a\0b: 2\n", 14));
    Diagnostics d;
    d.error(s, Loc{1, 10}, "bad");
    EXPECT_EQ(d.render(), "m.mnd:1:10: error: bad\ndense a?b: 2\n         ^\n");
}

TEST(AtomicWrite, SeveralFilesAllOrNothing) {
    fs::path dir = fs::temp_directory_path() / "meander-atomic-many";
    fs::remove_all(dir);
    fs::create_directories(dir / "b.cpp");  // a folder where the second file should go
    std::ofstream(dir / "a.hpp") << "old";
    Diagnostics d;
    EXPECT_FALSE(write_files_atomic({{(dir / "a.hpp").string(), "new"}, {(dir / "b.cpp").string(), "x"}}, d));
    EXPECT_EQ(d.render(), (dir / "b.cpp").string() + ": error: cannot write file: it is a directory\n");
    std::ifstream in(dir / "a.hpp");
    std::string text;
    std::getline(in, text);
    EXPECT_EQ(text, "old");  // untouched: nothing is renamed before every file is written
    int n = 0;
    for ([[maybe_unused]] auto& e : fs::directory_iterator(dir)) ++n;
    EXPECT_EQ(n, 2);  // no temporaries left
    fs::remove_all(dir);
}

TEST(AtomicWrite, WritesThroughASymlinkAndKeepsPermissions) {
    fs::path dir = fs::temp_directory_path() / "meander-atomic-link";
    fs::remove_all(dir);
    fs::create_directories(dir);
    std::ofstream(dir / "real.mnd") << "old";
    fs::permissions(dir / "real.mnd", fs::perms::owner_read | fs::perms::owner_write, fs::perm_options::replace);
    fs::create_symlink("real.mnd", dir / "link.mnd");
    Diagnostics d;
    ASSERT_TRUE(write_file_atomic((dir / "link.mnd").string(), "new", d)) << d.render();
    EXPECT_TRUE(fs::is_symlink(dir / "link.mnd"));
    std::ifstream in(dir / "real.mnd");
    std::string text;
    std::getline(in, text);
    EXPECT_EQ(text, "new");
    EXPECT_EQ(fs::status(dir / "real.mnd").permissions(), fs::perms::owner_read | fs::perms::owner_write);
    fs::remove_all(dir);
}
