// Malformed weights: every case writes its bad file (or edits a good tensor
// set), runs the reader or the binder, and asserts the exact diagnostics.
// The expected texts are the messages meander promises; positions in
// listings and descriptions are counted by hand from the texts below.
#include "compiler/weights.hpp"

#include <gtest/gtest.h>
#include <zip.h>

#include <cmath>
#include <cstdint>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <algorithm>
#include <functional>
#include <limits>
#include <sstream>

#include "test_support.hpp"

namespace fs = std::filesystem;
using namespace meander;
using test::dense_block;
using test::read_text;

namespace {

fs::path scratch(const std::string& name) { return test::scratch_dir("test_bad_weights", name); }

void write(const fs::path& p, const std::string& bytes) { test::write_text(p, bytes); }

std::string replace_all(std::string s, const std::string& from, const std::string& to) {
    for (std::size_t at = s.find(from); at != std::string::npos; at = s.find(from, at + to.size()))
        s.replace(at, from.size(), to);
    return s;
}

std::string le(std::uint64_t v, int n) {
    std::string out;
    for (int i = 0; i < n; ++i) out += static_cast<char>((v >> (8 * i)) & 0xff);
    return out;
}

// A .npy image as NEP 1 lays it out: header padded with spaces to a multiple
// of 64 bytes and ended by a newline.
std::string npy(const std::string& dict, const std::string& data, int major = 1) {
    std::size_t prefix = major == 1 ? 10 : 12;
    std::string h = dict;
    while ((prefix + h.size() + 1) % 64 != 0) h += ' ';
    h += '\n';
    std::string out = "\x93NUMPY";
    out += static_cast<char>(major);
    out += '\0';
    out += le(h.size(), major == 1 ? 2 : 4);
    return out + h + data;
}

std::string zeros(std::size_t n) { return std::string(n, '\0'); }

const std::string dict_3x4 = "{'descr': '<f4', 'fortran_order': False, 'shape': (3, 4), }";

// A zip archive written with libzip; `deflate` picks the compression method.
void write_zip(const fs::path& p, const std::vector<std::pair<std::string, std::string>>& members, bool deflate) {
    int err = 0;
    zip_t* za = zip_open(p.string().c_str(), ZIP_CREATE | ZIP_TRUNCATE, &err);
    ASSERT_NE(za, nullptr);
    for (const auto& [name, bytes] : members) {
        zip_source_t* src = zip_source_buffer(za, bytes.data(), bytes.size(), 0);
        ASSERT_NE(src, nullptr);
        zip_int64_t idx = zip_file_add(za, name.c_str(), src, ZIP_FL_ENC_UTF_8);
        ASSERT_GE(idx, 0);
        zip_set_file_compression(za, static_cast<zip_uint64_t>(idx), deflate ? ZIP_CM_DEFLATE : ZIP_CM_STORE, 0);
    }
    ASSERT_EQ(zip_close(za), 0);
}

// A member's data that compresses well, so damage lands inside the deflate stream.
std::string layer_npy() {
    std::string data;
    for (int i = 0; i < 64; ++i) {
        float f = static_cast<float>(i % 7) * 0.5f;
        char b[4];
        std::memcpy(b, &f, 4);
        data.append(b, 4);
    }
    return npy("{'descr': '<f4', 'fortran_order': False, 'shape': (16, 4), }", data);
}

// Flips the bytes at [at, at+n) of a file.
void damage(const fs::path& p, std::size_t at, std::size_t n) {
    std::string bytes = read_text(p);
    for (std::size_t i = at; i < at + n && i < bytes.size(); ++i) bytes[i] = static_cast<char>(~bytes[i]);
    write(p, bytes);
}

// ---------------------------------------------------------------------------
// Reading: each case writes files into DIR and returns the path to read;
// "DIR" in the expected text stands for that folder.

struct ReadCase {
    const char* name;
    std::function<fs::path(const fs::path& dir)> setup;
    const char* expected;
};

fs::path file(const fs::path& dir, const char* name, const std::string& bytes) {
    write(dir / name, bytes);
    return dir / name;
}

const ReadCase read_cases[] = {
    {"npy_bad_magic", [](const fs::path& d) { return file(d, "w.npy", std::string("\x93NUMPZ\x01\x00", 8) + npy(dict_3x4, zeros(48)).substr(8)); },
     "DIR/w.npy: error: not a .npy file: bad magic bytes\n"},
    {"npy_text_file", [](const fs::path& d) { return file(d, "w.npy", "1.0, 2.0\n"); },
     "DIR/w.npy: error: not a .npy file: bad magic bytes\n"},
    {"npy_no_header_length", [](const fs::path& d) { return file(d, "w.npy", std::string("\x93NUMPY\x01\x00\x76", 9)); },
     "DIR/w.npy: error: header is truncated\n"},
    {"npy_truncated_header", [](const fs::path& d) {
         return file(d, "w.npy", std::string("\x93NUMPY\x01\x00", 8) + le(118, 2) + "{'descr': '<f4', 'fo");
     },
     "DIR/w.npy: error: header is truncated: it declares 118 bytes, 20 present\n"},
    {"npy_version_4", [](const fs::path& d) {
         std::string b = npy(dict_3x4, zeros(48), 2);
         b[6] = 4;
         return file(d, "w.npy", b);
     },
     "DIR/w.npy: error: unsupported .npy format version 4.0 (1.0, 2.0 and 3.0 are read)\n"},
    {"npy_truncated_data", [](const fs::path& d) { return file(d, "w.npy", npy(dict_3x4, zeros(40))); },
     "DIR/w.npy: error: data is truncated: shape (3, 4) of float32 needs 48 bytes of data, 40 present\n"},
    {"npy_trailing_bytes", [](const fs::path& d) { return file(d, "w.npy", npy(dict_3x4, zeros(52), 3)); },
     "DIR/w.npy: error: unexpected bytes after the data: shape (3, 4) of float32 needs 48 bytes of data, 52 present\n"},
    {"npy_int32", [](const fs::path& d) {
         return file(d, "w.npy", npy("{'descr': '<i4', 'fortran_order': False, 'shape': (3, 4), }", zeros(48)));
     },
     "DIR/w.npy: error: unsupported dtype '<i4': meander reads float32 ('<f4', '>f4') and float64 ('<f8', '>f8')\n"},
    {"npy_half", [](const fs::path& d) {
         return file(d, "w.npy", npy("{'descr': '<f2', 'fortran_order': False, 'shape': (3, 4), }", zeros(24)));
     },
     "DIR/w.npy: error: unsupported dtype '<f2': meander reads float32 ('<f4', '>f4') and float64 ('<f8', '>f8')\n"},
    {"npy_structured", [](const fs::path& d) {
         return file(d, "w.npy", npy("{'descr': [('a', '<f4')], 'fortran_order': False, 'shape': (3,), }", zeros(12)));
     },
     "DIR/w.npy: error: bad header: 'descr' must be a string such as '<f4' (structured dtypes are not read)\n"},
    {"npy_fortran_order", [](const fs::path& d) {
         return file(d, "w.npy", npy("{'descr': '>f8', 'fortran_order': True, 'shape': (3, 4), }", zeros(96)));
     },
     "DIR/w.npy: error: fortran_order is True: meander reads C-order arrays only (save np.ascontiguousarray(a))\n"},
    {"npy_header_not_dict", [](const fs::path& d) { return file(d, "w.npy", npy("[3, 4]", zeros(48))); },
     "DIR/w.npy: error: header is not a dict: [3, 4]\n"},
    {"npy_missing_shape", [](const fs::path& d) {
         return file(d, "w.npy", npy("{'descr': '<f4', 'fortran_order': False}", zeros(4)));
     },
     "DIR/w.npy: error: bad header: missing key 'shape'\n"},
    {"npy_unknown_key", [](const fs::path& d) {
         return file(d, "w.npy", npy("{'descr': '<f4', 'order': 'C', 'shape': (3, 4), }", zeros(48)));
     },
     "DIR/w.npy: error: bad header: unknown key 'order'\n"},
    {"npy_duplicate_key", [](const fs::path& d) {
         return file(d, "w.npy", npy("{'descr': '<f4', 'descr': '<f8', 'fortran_order': False, 'shape': (3, 4), }", zeros(48)));
     },
     "DIR/w.npy: error: bad header: duplicate key 'descr'\n"},
    {"npy_shape_is_a_number", [](const fs::path& d) {
         return file(d, "w.npy", npy("{'descr': '<f4', 'fortran_order': False, 'shape': (3), }", zeros(12)));
     },
     "DIR/w.npy: error: bad header: 'shape' must be a tuple: (3) is a number, a tuple is (3,)\n"},
    {"npy_negative_dimension", [](const fs::path& d) {
         return file(d, "w.npy", npy("{'descr': '<f4', 'fortran_order': False, 'shape': (-3, 4), }", zeros(48)));
     },
     "DIR/w.npy: error: bad header: 'shape' must be a tuple of non-negative integers\n"},
    {"npy_missing_comma", [](const fs::path& d) {
         return file(d, "w.npy", npy("{'descr': '<f4' 'fortran_order': False, 'shape': (3, 4), }", zeros(48)));
     },
     "DIR/w.npy: error: bad header: expected ',' or '}' after the value of 'descr'\n"},
    {"npy_shape_overflows", [](const fs::path& d) {
         return file(d, "w.npy", npy("{'descr': '<f8', 'fortran_order': False, 'shape': (4611686018427387904, 8), }", ""));
     },
     "DIR/w.npy: error: shape (4611686018427387904, 8) is too large\n"},
    {"npy_huge_declared_size", [](const fs::path& d) {
         // 8 TB declared in a 64-byte file: refused before any allocation.
         return file(d, "w.npy", npy("{'descr': '<f8', 'fortran_order': False, 'shape': (1000000000000,), }", ""));
     },
     "DIR/w.npy: error: data is truncated: shape (1000000000000,) of float64 needs 8000000000000 bytes of data, 0 present\n"},
    {"npy_dimension_too_large", [](const fs::path& d) {
         return file(d, "w.npy", npy("{'descr': '<f4', 'fortran_order': False, 'shape': (99999999999999999999999,), }", ""));
     },
     "DIR/w.npy: error: bad header: dimension 99999999999999999999999 is too large\n"},
    {"npy_rank_5", [](const fs::path& d) {
         return file(d, "w.npy", npy("{'descr': '<f4', 'fortran_order': False, 'shape': (1, 1, 1, 2, 1), }", zeros(8)));
     },
     "DIR/w.npy: error: shape (1, 1, 1, 2, 1) has rank 5: at most 4 dimensions are read\n"},
    {"npz_not_a_zip", [](const fs::path& d) { return file(d, "w.npz", npy(dict_3x4, zeros(48))); },
     "DIR/w.npz: error: cannot open the .npz archive: not a zip archive\n"},
    {"npz_damaged_directory", [](const fs::path& d) {
         fs::path p = d / "w.npz";
         write_zip(p, {{"lift.weight.npy", layer_npy()}, {"lift.bias.npy", npy("{'descr': '<f4', 'fortran_order': False, 'shape': (16,), }", zeros(64))}}, false);
         // Damage the first central directory entry's offset field (bytes 42..45 of the entry).
         std::string b = read_text(p);
         std::size_t cd = b.find(std::string("PK\x01\x02", 4));
         damage(p, cd + 42, 4);
         return p;
     },
     "DIR/w.npz: error: cannot open the .npz archive: the zip directory is damaged\n"},
    {"npz_damaged_directory_signature", [](const fs::path& d) {
         fs::path p = d / "w.npz";
         write_zip(p, {{"lift.weight.npy", layer_npy()}, {"lift.bias.npy", npy("{'descr': '<f4', 'fortran_order': False, 'shape': (16,), }", zeros(64))}}, true);
         std::string b = read_text(p);
         std::size_t cd = b.rfind(std::string("PK\x01\x02", 4));  // the second entry
         damage(p, cd, 2);
         return p;
     },
     "DIR/w.npz: error: cannot open the .npz archive: the zip directory is damaged\n"},
    {"npz_truncated_archive", [](const fs::path& d) {
         fs::path p = d / "w.npz";
         write_zip(p, {{"lift.weight.npy", layer_npy()}}, false);
         std::string b = read_text(p);
         write(p, b.substr(0, b.size() - 30));
         return p;
     },
     "DIR/w.npz: error: cannot open the .npz archive: the zip directory is damaged\n"},
    {"npz_damaged_stored_member", [](const fs::path& d) {
         fs::path p = d / "w.npz";
         write_zip(p, {{"lift.weight.npy", layer_npy()}, {"lift.bias.npy", npy("{'descr': '<f4', 'fortran_order': False, 'shape': (16,), }", zeros(64))}}, false);
         // Local header (30 bytes) + name (15) + npy header (128): a data byte.
         damage(p, 30 + 15 + 128 + 10, 1);
         return p;
     },
     "DIR/w.npz: error: member 'lift.weight.npy': damaged: CRC mismatch\n"},
    {"npz_damaged_deflated_member", [](const fs::path& d) {
         fs::path p = d / "w.npz";
         write_zip(p, {{"lift.weight.npy", layer_npy()}}, true);
         damage(p, 30 + 15 + 2, 6);
         return p;
     },
     "DIR/w.npz: error: member 'lift.weight.npy': damaged: the compressed data is invalid\n"},
    {"npz_member_not_npy", [](const fs::path& d) {
         fs::path p = d / "w.npz";
         write_zip(p, {{"lift.weight.npy", layer_npy()}, {"README.txt", "trained on the east line\n"}}, true);
         return p;
     },
     "DIR/w.npz: error: member 'README.txt' is not a .npy array (an .npz holds NAME.npy members)\n"},
    {"npz_member_bad_npy", [](const fs::path& d) {
         fs::path p = d / "w.npz";
         write_zip(p, {{"lift.weight.npy", layer_npy()}, {"lift.bias.npy", npy(dict_3x4, zeros(20))}}, true);
         return p;
     },
     "DIR/w.npz: error: member 'lift.bias.npy': data is truncated: shape (3, 4) of float32 needs 48 bytes of data, 20 present\n"},
    {"npz_no_members", [](const fs::path& d) {
         // An empty archive: just the end-of-directory record.
         return file(d, "w.npz", std::string("PK\x05\x06", 4) + zeros(18));
     },
     "DIR/w.npz: error: the .npz archive holds no .npy arrays\n"},
    {"folder_without_npy", [](const fs::path& d) {
         fs::create_directories(d / "w");
         write(d / "w" / "notes.txt", "nothing here\n");
         return d / "w";
     },
     "DIR/w: error: no .npy files in this folder\n"},
    {"folder_with_bad_file", [](const fs::path& d) {
         fs::create_directories(d / "w");
         write(d / "w" / "a.npy", npy(dict_3x4, zeros(48)));
         write(d / "w" / "b.npy", npy("{'descr': '<i8', 'fortran_order': False, 'shape': (2,), }", zeros(16)));
         return d / "w";
     },
     "DIR/w/b.npy: error: unsupported dtype '<i8': meander reads float32 ('<f4', '>f4') and float64 ('<f8', '>f8')\n"},
    {"unknown_extension", [](const fs::path& d) { return file(d, "w.h5", "HDF"); },
     "DIR/w.h5: error: unknown weights format '.h5': expected .npz, .npy, .mnw, .pt, .pth, .safetensors or a folder of .npy files\n"},
    {"missing_file", [](const fs::path& d) { return d / "absent.npz"; },
     "DIR/absent.npz: error: cannot read file: No such file or directory\n"},

    // Weight listings: position, line and caret.
    {"listing_bad_number", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\ntensor w float32 2 3\n1 2 3\n4 x5 6\n");
     },
     "DIR/w.mnw:4:3: error: expected a float32 number, found 'x5'\n4 x5 6\n  ^\n"},
    {"listing_hex_float", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\ntensor w float64 2\n0x1p3 1\n");
     },
     "DIR/w.mnw:3:1: error: expected a float64 number, found '0x1p3'\n0x1p3 1\n^\n"},
    {"listing_comma_decimal", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\ntensor w float32 2\n  1,5 2\n");
     },
     "DIR/w.mnw:3:3: error: expected a float32 number, found '1,5'\n  1,5 2\n  ^\n"},
    {"listing_out_of_range", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\ntensor w float32 2\n1 3.5e38\n");
     },
     "DIR/w.mnw:3:3: error: 3.5e38 is out of range for float32\n1 3.5e38\n  ^\n"},
    {"listing_too_few_values", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\ntensor w float32 2 3\n1 2 3\n4 5   # lost one\n");
     },
     "DIR/w.mnw:4:4: error: tensor 'w' row 1: expected 3 values on this line, found 2\n4 5   # lost one\n   ^\n"},
    {"listing_too_many_values", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\ntensor w float32 2 10\n1 2 3 4 5 6 7 8 9 10\n");
     },
     "DIR/w.mnw:3:17: error: tensor 'w' row 0: expected 8 values on this line, found 10\n1 2 3 4 5 6 7 8 9 10\n                ^\n"},
    {"listing_bad_header_line", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\n\ntensr w float32 2\n1 2\n");
     },
     "DIR/w.mnw:3:1: error: expected a tensor header 'tensor NAME DTYPE DIM...'\ntensr w float32 2\n^\n"},
    {"listing_header_without_name", [](const fs::path& d) { return file(d, "w.mnw", "meander-weights 1\ntensor   # ?\n"); },
     "DIR/w.mnw:2:7: error: expected a tensor name after 'tensor'\ntensor   # ?\n      ^\n"},
    {"listing_unknown_dtype", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\ntensor w float16 2\n1 2\n");
     },
     "DIR/w.mnw:2:10: error: unknown dtype 'float16' (float32 or float64)\ntensor w float16 2\n         ^\n"},
    {"listing_bad_dimension", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\ntensor w float32 2 -3\n");
     },
     "DIR/w.mnw:2:20: error: expected a dimension (a non-negative integer), found '-3'\ntensor w float32 2 -3\n                   ^\n"},
    {"listing_rank_5", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\ntensor w float32 1 1 1 1 1\n1\n");
     },
     "DIR/w.mnw:2:26: error: tensor 'w' has more than 4 dimensions\ntensor w float32 1 1 1 1 1\n                         ^\n"},
    {"listing_huge_shape", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\ntensor w float32 100000 100000\n1\n");
     },
     "DIR/w.mnw:2:8: error: tensor 'w' declares 10000000000 values, more than the listing holds\ntensor w float32 100000 100000\n       ^\n"},
    {"listing_duplicate_tensor", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\n\ntensor w float32 1\n1\n\ntensor b float32 1\n2\n\ntensor w float64 1\n3\n");
     },
     "DIR/w.mnw:9:8: error: duplicate tensor 'w' (first listed at line 3)\ntensor w float64 1\n       ^\n"},
    {"listing_no_version_line", [](const fs::path& d) {
         return file(d, "w.mnw", "# weights\ntensor w float32 1\n1\n");
     },
     "DIR/w.mnw:2:1: error: expected 'meander-weights 1' on the first line of a weight listing\ntensor w float32 1\n^\n"},
    {"listing_empty_file", [](const fs::path& d) { return file(d, "w.mnw", ""); },
     "DIR/w.mnw:1:1: error: expected 'meander-weights 1' on the first line of a weight listing\n\n^\n"},
    {"listing_version_2", [](const fs::path& d) { return file(d, "w.mnw", "meander-weights 2\n"); },
     "DIR/w.mnw:1:17: error: unsupported weight listing version '2' (this meander reads version 1)\nmeander-weights 2\n                ^\n"},
    {"listing_ends_early", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\ntensor lift.weight float32 3 2\n1 2\n3 4\n");
     },
     "DIR/w.mnw:2:8: error: tensor 'lift.weight' is incomplete: the listing ends after 2 of its 3 value lines\n"
     "tensor lift.weight float32 3 2\n       ^\n"},
    {"listing_next_tensor_too_soon", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\ntensor a float32 2 2\n1 2\ntensor b float32 1\n1\n");
     },
     "DIR/w.mnw:4:1: error: tensor 'a' is incomplete: a new tensor starts after 1 of its 2 value lines\ntensor b float32 1\n^\n"},
    // A 256 MiB + 128 byte member (67108864 zero float32 values and the .npy header),
    // 260 KiB deflated: past the 256 MiB limit of any weights file (README, "Limits"),
    // refused before it is inflated.
    {"npz_member_too_large", [](const fs::path& d) {
         fs::copy_file(fs::path(MEANDER_SOURCE_DIR) / "tests/data/weights/huge_member.npz", d / "w.npz");
         return d / "w.npz";
     },
     "DIR/w.npz: error: member 'junk.npy' would bring the archive's inflated size to 268435584 bytes, beyond the "
     "limit of 268435456 bytes (256 MiB, meander's limit for a weights file; set MEANDER_WEIGHTS_LIMIT_MIB to raise "
     "it); nothing was inflated\n"},
    {"listing_unterminated_quote", [](const fs::path& d) {
         return file(d, "w.mnw", "meander-weights 1\ntensor \"lift weight float32 1\n1\n");
     },
     "DIR/w.mnw:2:8: error: unterminated quoted name\ntensor \"lift weight float32 1\n       ^\n"},
};

void PrintTo(const ReadCase& c, std::ostream* os) { *os << c.name; }

class Read : public testing::TestWithParam<ReadCase> {};

TEST_P(Read, ExactDiagnostic) {
    const ReadCase& c = GetParam();
    fs::path dir = scratch(c.name);
    fs::path p = c.setup(dir);
    if (fs::is_regular_file(p)) test::save_fuzz_seed("weights", read_text(p));
    Diagnostics diags;
    auto set = read_weights(p.string(), diags);
    EXPECT_FALSE(set.has_value());
    EXPECT_EQ(replace_all(diags.render(), dir.string(), "DIR"), c.expected);
}

INSTANTIATE_TEST_SUITE_P(BadFiles, Read, testing::ValuesIn(read_cases),
                         [](const testing::TestParamInfo<ReadCase>& i) { return std::string(i.param.name); });

// ---------------------------------------------------------------------------
// Binding: a good tensor set for the model below, edited by each case.

const char* description =
    "model greenhouse\n"
    "weights \"greenhouse.mnw\"\n"
    "input vent[1]\n"
    "dense lift: 1 -> 4, tanh\n"
    "continuous drift: 4, t in [0, 2] {\n"
    "  dense f1: 4 + t -> 4, softplus\n"
    "  dense f2: 4 -> 4\n"
    "  solver heun, steps 10\n"
    "}\n"
    "dense head: 4 -> 1, no-bias\n"
    "output humidity[1]\n";

Dense make_dense(const std::string& name, Loc loc, int in, bool time, int out, bool bias) {
    Dense d = test::dense_layer(name, in, out, Activation::identity, time, bias);
    d.loc = loc;
    d.weight_tensor = name + ".weight";
    d.bias_tensor = bias ? name + ".bias" : "";
    return d;
}

Model greenhouse() {
    Model m;
    m.name = "greenhouse";
    m.loc = Loc{1, 7};
    m.weights_path = "greenhouse.mnw";
    m.weights_loc = Loc{2, 9};
    m.input_size = 1;
    m.output_size = 1;
    m.blocks.push_back(dense_block(make_dense("lift", Loc{4, 7}, 1, false, 4, true)));
    Block c;
    c.kind = Block::Kind::continuous;
    c.continuous.name = "drift";
    c.continuous.loc = Loc{5, 12};
    c.continuous.width = 4;
    c.continuous.field.push_back(dense_block(make_dense("f1", Loc{6, 9}, 4, true, 4, true)));
    c.continuous.field.push_back(dense_block(make_dense("f2", Loc{7, 9}, 4, false, 4, true)));
    m.blocks.push_back(c);
    m.blocks.push_back(dense_block(make_dense("head", Loc{10, 7}, 4, false, 1, false)));
    return m;
}

Tensor tensor(const std::string& name, std::vector<std::size_t> shape) {
    std::size_t n = 1;
    for (auto d : shape) n *= d;
    Tensor t{name, shape, std::vector<double>(n, 0.5), "float32"};
    return t;
}

TensorSet good_set() {
    TensorSet s;
    s.path = "greenhouse.mnw";
    s.tensors = {tensor("lift.weight", {4, 1}), tensor("lift.bias", {4}),  tensor("f1.weight", {4, 5}),
                 tensor("f1.bias", {4}),        tensor("f2.weight", {4, 4}), tensor("f2.bias", {4}),
                 tensor("head.weight", {1, 4})};
    return s;
}

Tensor& named(TensorSet& s, const std::string& name) {
    for (auto& t : s.tensors)
        if (t.name == name) return t;
    throw std::runtime_error("no tensor " + name);
}

void remove(TensorSet& s, const std::string& name) {
    s.tensors.erase(std::remove_if(s.tensors.begin(), s.tensors.end(), [&](const Tensor& t) { return t.name == name; }),
                    s.tensors.end());
}

struct BindCase {
    const char* name;
    std::function<void(TensorSet&)> edit;
    const char* expected;
};

const BindCase bind_cases[] = {
    {"weight_wrong_shape", [](TensorSet& s) { named(s, "lift.weight") = tensor("lift.weight", {4, 2}); },
     "greenhouse.mnd:4:7: error: layer 'lift': tensor 'lift.weight' has shape (4, 2), expected (4, 1)\n"
     "dense lift: 1 -> 4, tanh\n      ^\n"},
    {"weight_1d_for_one_input", [](TensorSet& s) { named(s, "lift.weight") = tensor("lift.weight", {4}); },
     "greenhouse.mnd:4:7: error: layer 'lift': tensor 'lift.weight' has shape (4,), expected (4, 1)\n"
     "dense lift: 1 -> 4, tanh\n      ^\n"},
    {"weight_transposed", [](TensorSet& s) { named(s, "f1.weight") = tensor("f1.weight", {5, 4}); },
     "greenhouse.mnd:6:9: error: layer 'f1': tensor 'f1.weight' has shape (5, 4), expected (4, 5): it looks transposed (a weight is (out, in); write 'transposed' for a file that stores (in, out))\n"
     "  dense f1: 4 + t -> 4, softplus\n        ^\n"},
    {"weight_without_time_column", [](TensorSet& s) { named(s, "f1.weight") = tensor("f1.weight", {4, 4}); },
     "greenhouse.mnd:6:9: error: layer 'f1': tensor 'f1.weight' has shape (4, 4), expected (4, 5): "
     "with '+ t' the weight has one more column, for time (the last)\n"
     "  dense f1: 4 + t -> 4, softplus\n        ^\n"},
    {"bias_wrong_shape", [](TensorSet& s) { named(s, "f1.bias") = tensor("f1.bias", {4, 1}); },
     "greenhouse.mnd:6:9: error: layer 'f1': tensor 'f1.bias' has shape (4, 1), expected (4,)\n"
     "  dense f1: 4 + t -> 4, softplus\n        ^\n"},
    {"scalar_bias", [](TensorSet& s) { named(s, "f2.bias") = tensor("f2.bias", {}); },
     "greenhouse.mnd:7:9: error: layer 'f2': tensor 'f2.bias' has shape (), expected (4,)\n"
     "  dense f2: 4 -> 4\n        ^\n"},
    {"values_do_not_fill_the_shape", [](TensorSet& s) { named(s, "f2.bias").values.pop_back(); },
     "greenhouse.mnd:7:9: error: layer 'f2': tensor 'f2.bias' holds 3 values for its shape (4,)\n"
     "  dense f2: 4 -> 4\n        ^\n"},
    {"nan_value", [](TensorSet& s) { named(s, "f2.weight").values[5] = std::numeric_limits<double>::quiet_NaN(); },
     "greenhouse.mnd:7:9: error: layer 'f2': tensor 'f2.weight' holds NaN at flat index 5 [1, 1]\n"
     "  dense f2: 4 -> 4\n        ^\n"},
    {"inf_value", [](TensorSet& s) { named(s, "lift.bias").values[3] = std::numeric_limits<double>::infinity(); },
     "greenhouse.mnd:4:7: error: layer 'lift': tensor 'lift.bias' holds inf at flat index 3 [3]\n"
     "dense lift: 1 -> 4, tanh\n      ^\n"},
    {"minus_inf_value", [](TensorSet& s) { named(s, "head.weight").values[2] = -std::numeric_limits<double>::infinity(); },
     "greenhouse.mnd:10:7: error: layer 'head': tensor 'head.weight' holds -inf at flat index 2 [0, 2]\n"
     "dense head: 4 -> 1, no-bias\n      ^\n"},
    {"missing_with_close_name", [](TensorSet& s) { named(s, "f2.bias").name = "f2.biases"; },
     "greenhouse.mnd:7:9: error: layer 'f2': no tensor 'f2.bias' in greenhouse.mnw; close names: 'f2.biases'\n"
     "  dense f2: 4 -> 4\n        ^\n"
     "greenhouse.mnd:2:9: error: tensor 'f2.biases' in greenhouse.mnw is not used by any layer\n"
     "weights \"greenhouse.mnw\"\n        ^\n"},
    {"missing_under_a_prefix", [](TensorSet& s) { named(s, "f2.weight").name = "model.drift.f2.weight"; },
     "greenhouse.mnd:7:9: error: layer 'f2': no tensor 'f2.weight' in greenhouse.mnw; close names: 'model.drift.f2.weight'\n"
     "  dense f2: 4 -> 4\n        ^\n"
     "greenhouse.mnd:2:9: error: tensor 'model.drift.f2.weight' in greenhouse.mnw is not used by any layer\n"
     "weights \"greenhouse.mnw\"\n        ^\n"},
    {"missing_nothing_close", [](TensorSet& s) { remove(s, "lift.weight"); },
     "greenhouse.mnd:4:7: error: layer 'lift': no tensor 'lift.weight' in greenhouse.mnw (it holds 6 tensors)\n"
     "dense lift: 1 -> 4, tanh\n      ^\n"},
    {"extra_tensor", [](TensorSet& s) { s.tensors.push_back(tensor("drift.scale", {1})); },
     "greenhouse.mnd:2:9: error: tensor 'drift.scale' in greenhouse.mnw is not used by any layer; a tensor the model does "
     "not need goes in an 'ignore' statement\n"
     "weights \"greenhouse.mnw\"\n        ^\n"},
    {"extra_tensors", [](TensorSet& s) {
         s.tensors.push_back(tensor("spare", {2}));
         s.tensors.push_back(tensor("drift.scale", {1}));
     },
     "greenhouse.mnd:2:9: error: 2 tensors in greenhouse.mnw are not used by any layer: 'spare', 'drift.scale'; a tensor "
     "the model does not need goes in an 'ignore' statement\n"
     "weights \"greenhouse.mnw\"\n        ^\n"},
    {"bias_of_a_no_bias_layer", [](TensorSet& s) { s.tensors.push_back(tensor("head.bias", {1})); },
     "greenhouse.mnd:2:9: error: tensor 'head.bias' in greenhouse.mnw is not used by any layer\n"
     "weights \"greenhouse.mnw\"\n        ^\n"
     "greenhouse.mnd:10:7: note: layer 'head' is declared no-bias\n"
     "dense head: 4 -> 1, no-bias\n      ^\n"},
};

void PrintTo(const BindCase& c, std::ostream* os) { *os << c.name; }

class Bind : public testing::TestWithParam<BindCase> {};

TEST_P(Bind, ExactDiagnostic) {
    const BindCase& c = GetParam();
    TensorSet set = good_set();
    c.edit(set);
    Model m = greenhouse();
    Source src("greenhouse.mnd", description);
    Diagnostics diags;
    EXPECT_FALSE(bind_weights(m, src, set, diags));
    EXPECT_EQ(diags.render(), c.expected);
}

INSTANTIATE_TEST_SUITE_P(BadTensors, Bind, testing::ValuesIn(bind_cases),
                         [](const testing::TestParamInfo<BindCase>& i) { return std::string(i.param.name); });

TEST(Bind, TheUneditedSetBinds) {
    // The baseline of the table: without an edit, binding succeeds.
    TensorSet set = good_set();
    Model m = greenhouse();
    Source src("greenhouse.mnd", description);
    Diagnostics diags;
    EXPECT_TRUE(bind_weights(m, src, set, diags));
    EXPECT_EQ(diags.render(), "");
}

}  // namespace

namespace {

// Readers keep non-finite values; binding names the tensor and the flat index.
TEST(Bind, NonFiniteValuesFromFilesAreRefused) {
    fs::path dir = scratch("non_finite");
    std::string data;
    for (float f : {0.5f, 0.25f, std::numeric_limits<float>::quiet_NaN(), 1.0f}) {
        char b[4];
        std::memcpy(b, &f, 4);
        data.append(b, 4);
    }
    write(dir / "lift.weight.npy", npy("{'descr': '<f4', 'fortran_order': False, 'shape': (4, 1), }", data));
    write(dir / "rest.mnw",
          "meander-weights 1\n"
          "tensor lift.bias float32 4\n0 0 0 0\n"
          "tensor f1.weight float64 4 5\n0 0 0 0 0\n0 0 0 0 0\n0 0 0 0 0\n0 0 0 0 0\n"
          "tensor f1.bias float32 4\n0 0 0 0\n"
          "tensor f2.weight float32 4 4\n0 0 0 0\n0 0 0 0\n0 0 -inf 0\n0 0 0 0\n"
          "tensor f2.bias float32 4\n0 0 0 0\n"
          "tensor head.weight float32 1 4\n0 0 0 0\n");
    Diagnostics diags;
    auto npy_set = read_weights((dir / "lift.weight.npy").string(), diags);
    auto listed = read_weights((dir / "rest.mnw").string(), diags);
    ASSERT_TRUE(npy_set && listed) << diags.render();
    TensorSet set = *listed;
    set.path = "greenhouse.mnw";
    set.tensors.push_back(npy_set->tensors.at(0));
    Model m = greenhouse();
    Source src("greenhouse.mnd", description);
    EXPECT_FALSE(bind_weights(m, src, set, diags));
    EXPECT_EQ(diags.render(),
              "greenhouse.mnd:4:7: error: layer 'lift': tensor 'lift.weight' holds NaN at flat index 2 [2, 0]\n"
              "dense lift: 1 -> 4, tanh\n      ^\n"
              "greenhouse.mnd:7:9: error: layer 'f2': tensor 'f2.weight' holds -inf at flat index 10 [2, 2]\n"
              "  dense f2: 4 -> 4\n        ^\n");
}

}  // namespace

namespace {

// Cut short anywhere, a weights file gives a diagnostic, never a crash.
TEST(Robustness, EveryPrefixOfAGoodFile) {
    const fs::path data = fs::path(MEANDER_SOURCE_DIR) / "tests" / "data" / "weights";
    fs::path dir = scratch("prefixes");
    for (const char* f : {"f4_be.npy", "v3_rank4.npy", "stored.npz", "deflated.npz", "numpy_text.mnw"}) {
        std::string bytes = read_text(data / f);
        bool listing = fs::path(f).extension() == ".mnw";
        fs::path p = dir / f;
        // Every cut in the first 140 bytes (magic, header, zip local header),
        // then some 40 more spread over the file (writing files is slow here).
        for (std::size_t n = 0; n < bytes.size(); n += n < 140 ? 1 : std::max<std::size_t>(1, bytes.size() / 40)) {
            write(p, bytes.substr(0, n));
            Diagnostics diags;
            auto set = read_weights(p.string(), diags);
            EXPECT_EQ(set.has_value(), diags.ok()) << f << " cut at " << n;
            // A listing cut between tensors is still a listing; binary files are not.
            if (!listing) EXPECT_FALSE(set.has_value()) << f << " cut at " << n;
        }
    }
}

// Every single-byte change of a binary file gives a set or a diagnostic.
TEST(Robustness, EveryFlippedByteOfAGoodFile) {
    const fs::path data = fs::path(MEANDER_SOURCE_DIR) / "tests" / "data" / "weights";
    fs::path dir = scratch("flips");
    for (const char* f : {"f8_le.npy", "deflated.npz"}) {
        std::string bytes = read_text(data / f);
        fs::path p = dir / f;
        for (std::size_t n = 0; n < bytes.size(); n += n < 128 ? 1 : std::max<std::size_t>(1, bytes.size() / 60)) {
            std::string b = bytes;
            b[n] = static_cast<char>(b[n] ^ 0x5a);
            write(p, b);
            Diagnostics diags;
            auto set = read_weights(p.string(), diags);
            EXPECT_EQ(set.has_value(), diags.ok()) << f << " byte " << n;
        }
    }
}

}  // namespace
