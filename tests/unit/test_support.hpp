// Shared by the unit test programs: small hand-made models (runtime/model.hpp),
// solver specs, linear fields, and files and processes. Only construction
// lives here; every expected value stays in the test that checks it.
#pragma once

#include <gtest/gtest.h>

#include <sys/wait.h>

#include <array>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include "runtime/integrate.hpp"
#include "runtime/model.hpp"

namespace meander::test {

// --- models built by hand ---------------------------------------------------

// A dense layer's shape; weights, tensor names and activation parameter are the caller's.
inline Dense dense_layer(const std::string& name, int in, int out, Activation act = Activation::identity,
                         bool time_input = false, bool has_bias = true) {
    Dense d;
    d.name = name;
    d.in = in;
    d.out = out;
    d.act = act;
    d.time_input = time_input;
    d.has_bias = has_bias;
    return d;
}

inline Block dense_block(Dense d) {
    Block b;
    b.kind = Block::Kind::dense;
    b.dense = std::move(d);
    return b;
}

inline Block residual(const std::string& name, int width, std::vector<Block> body) {
    Block b;
    b.kind = Block::Kind::residual;
    b.residual.name = name;
    b.residual.width = width;
    b.residual.body = std::move(body);
    return b;
}

inline Block continuous(const std::string& name, int width, int augment, double t0, double t1, std::vector<Block> field,
                        SolverSpec solver) {
    Block b;
    b.kind = Block::Kind::continuous;
    Continuous& c = b.continuous;
    c.name = name;
    c.width = width;
    c.augment = augment;
    c.t0 = t0;
    c.t1 = t1;
    c.field = std::move(field);
    c.solver = std::move(solver);
    return b;
}

// Input "x", output "y"; blocks may also be pushed afterwards.
inline Model model(const std::string& name, int in, int out, std::vector<Block> blocks = {}) {
    Model m;
    m.name = name;
    m.input_name = "x";
    m.input_size = in;
    m.output_name = "y";
    m.output_size = out;
    m.blocks = std::move(blocks);
    return m;
}

// Specs as a program builds them; `written` is left empty (no description).
inline SolverSpec fixed_solver(const std::string& method, int steps) {
    SolverSpec s;
    s.method = method;
    s.steps = steps;
    return s;
}

inline SolverSpec adaptive_solver(const std::string& method, double rtol, double atol, int max_steps) {
    SolverSpec s;
    s.method = method;
    s.rtol = rtol;
    s.atol = atol;
    s.max_steps = max_steps;
    return s;
}

// dy/dt = lambda y, any width.
inline Field linear_scalar(double lambda) {
    return [lambda](double, const Eigen::VectorXd& y, Eigen::VectorXd& dy) { dy = lambda * y; };
}

// --- files and processes --------------------------------------------------

// A fresh, empty folder MEANDER_BINARY_DIR/area/name.
inline std::filesystem::path scratch_dir(const std::string& area, const std::string& name) {
    std::filesystem::path dir = std::filesystem::path(MEANDER_BINARY_DIR) / area / name;
    std::filesystem::remove_all(dir);
    std::filesystem::create_directories(dir);
    return dir;
}

// A fresh folder under the system's temporary directory.
inline std::filesystem::path temp_dir(const std::string& tag) {
    std::string templ = (std::filesystem::temp_directory_path() / ("meander-" + tag + "-XXXXXX")).string();
    const char* made = mkdtemp(templ.data());
    EXPECT_NE(made, nullptr);
    return std::filesystem::path(templ);
}

inline void write_text(const std::filesystem::path& p, const std::string& text) {
    std::ofstream f(p, std::ios::binary);
    f << text;
}

inline std::string read_text(const std::filesystem::path& p) {
    std::ifstream f(p, std::ios::binary);
    std::ostringstream s;
    s << f.rdbuf();
    return s.str();
}

// With MEANDER_FUZZ_SEEDS set (tests/fuzz/make_corpus.sh sets it), writes an
// input a test feeds to a reader into $MEANDER_FUZZ_SEEDS/KIND, named by its
// content, to seed the fuzz corpus; otherwise does nothing.
inline void save_fuzz_seed(const std::string& kind, const std::string& bytes) {
    const char* dir = std::getenv("MEANDER_FUZZ_SEEDS");
    if (dir == nullptr || *dir == '\0' || bytes.size() > (64u << 10)) return;
    std::uint64_t h = 14695981039346656037ull;  // FNV-1a, for a file name only
    for (unsigned char c : bytes) h = (h ^ c) * 1099511628211ull;
    const std::filesystem::path folder = std::filesystem::path(dir) / kind;
    std::filesystem::create_directories(folder);
    char name[32];
    std::snprintf(name, sizeof name, "seed-%016llx", static_cast<unsigned long long>(h));
    write_text(folder / name, bytes);
}

struct RunResult {
    int status = -1;                // exit status; -1 when it did not exit normally
    std::string output;
};

// Runs a shell command as written and collects its standard output.
inline RunResult run_shell(const std::string& command) {
    RunResult r;
    FILE* p = popen(command.c_str(), "r");
    if (p == nullptr) return r;
    std::array<char, 4096> buf{};
    std::size_t n = 0;
    while ((n = std::fread(buf.data(), 1, buf.size(), p)) > 0) r.output.append(buf.data(), n);
    const int st = pclose(p);
    r.status = WIFEXITED(st) ? WEXITSTATUS(st) : -1;
    return r;
}

// Standard output and standard error together, and the exit status.
inline RunResult run(const std::string& command) { return run_shell(command + " 2>&1"); }

// Standard output only (standard error goes where the test's goes).
inline std::string capture(const std::string& command) { return run_shell(command).output; }

}  // namespace meander::test
