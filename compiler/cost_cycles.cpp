#include "cost_cycles.hpp"

#include <fcntl.h>
#include <fmt/format.h>
#include <poll.h>
#include <signal.h>
#include <spawn.h>
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <cctype>
#include <chrono>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <set>
#include <regex>
#include <sstream>
#include <thread>
#include <unordered_map>

#include "../runtime/evaluate.hpp"
#include "board_files.hpp"
#include "math_kernels_text.hpp"
#include "cost_object.hpp"
#include "cycle_prices.hpp"
#include "emit/render.hpp"
#include "selftest.hpp"

extern char** environ;

namespace meander {

namespace fs = std::filesystem;

std::string board_of(CoreClass core) {
    switch (core) {
    case CoreClass::cortex_m3: return "mps2-an385";
    case CoreClass::cortex_m4f: return "mps2-an386";
    case CoreClass::cortex_m7: return "mps2-an500";
    case CoreClass::cortex_m0: return "";
    }
    return "";
}

namespace {

constexpr std::size_t kSoftFloatRows = 8;
// A learning step runs the model forward about three times and back once: fewer rows.
constexpr std::size_t kLearnRows = 16;
constexpr std::size_t kLearnSoftFloatRows = 4;

// One instruction as the translation log lists it, its price, and what the
// rows spent on it.
struct Insn {
    std::uint32_t address = 0;
    std::uint32_t size = 2;
    InstructionPrice price;
    bool priced = true;            // false: not in the table, priced 1 cycle
    bool call = false;             // BL, BLX
    bool ret = false;              // BX, or a load of the PC (POP {.., pc}, LDR pc)
    std::string mnemonic;
    std::uint64_t executions = 0;  // inside inferences
    double cycles = 0.0;           // inside inferences
};

// What an instruction's cycles are charged to: a dense layer's own code, the
// activation kernel of a layer, or the rest (solver, checks, copies, driver).
struct Charge {
    enum Kind : std::uint8_t { other, dense, activation } kind = other;
    int layer = -1;
};

// Where an address of the emitted code comes from (its inlined frames).
struct Origin {
    enum Kind : std::uint8_t { dense, activation, kernel_function, other } kind = other;
    int layer = -1;
};

struct RowCycles {
    double cycles = 0.0;
    std::uint64_t instructions = 0;
    std::vector<double> blocks;
};

CycleSpread spread_of(std::vector<double> v) {
    CycleSpread s;
    if (v.empty()) return s;
    std::sort(v.begin(), v.end());
    s.min = v.front();
    s.max = v.back();
    const std::size_t m = v.size() / 2;
    s.median = v.size() % 2 ? v[m] : 0.5 * (v[m - 1] + v[m]);
    return s;
}

std::string first_line(std::string s) {
    const auto nl = s.find('\n');
    if (nl != std::string::npos) s.resize(nl);
    while (!s.empty() && (s.back() == '\r' || s.back() == ' ')) s.pop_back();
    return s;
}

// Runs a shell command with its output in `log`; true when it exits 0.
bool run_logged(const std::string& command, const fs::path& log) {
    const auto status = run_capture(fmt::format("{} > {} 2>&1; echo $?", command, shell_quote(log.string())));
    return status && first_line(*status) == "0";
}

std::string tail_of(const fs::path& file, std::size_t lines) {
    Diagnostics quiet;
    const auto text = read_file(file.string(), quiet);
    if (!text) return "";
    std::vector<std::string> all;
    std::istringstream in(*text);
    std::string line;
    while (std::getline(in, line)) all.push_back(line);
    std::string out;
    for (std::size_t i = all.size() > lines ? all.size() - lines : 0; i < all.size(); ++i) out += "\n  " + all[i];
    return out;
}

// The trace: instructions by address, translated blocks by start address, and
// the mark functions that split it into rows and blocks.
class TraceReader {
public:
    TraceReader(TimingTable table, std::uint32_t row_begin, std::uint32_t row_end, std::uint32_t block_begin,
                std::uint32_t block_end, std::unordered_map<std::uint32_t, Origin> origins, std::size_t layers)
        : table_(table), row_begin_(row_begin), row_end_(row_end), block_begin_(block_begin), block_end_(block_end),
          origins_(std::move(origins)), dense_(layers, 0.0), activation_(layers, 0.0) {}

    // Cycles inside inferences by layer: its dense code and its activation kernel; and the rest.
    const std::vector<double>& dense_cycles() const { return dense_; }
    const std::vector<double>& activation_cycles() const { return activation_; }
    double other_cycles() const { return other_; }

    void line(std::string_view l) {
        if (l.rfind("Trace ", 0) == 0) {
            finish_listing();
            executed(l);
        } else if (l.rfind("IN:", 0) == 0) {
            finish_listing();
            listing_ = true;
        } else if (listing_ && l.rfind("0x", 0) == 0) {
            listed(l);
        } else {
            finish_listing();
        }
    }

    bool bad() const { return !error_.empty(); }
    const std::string& error() const { return error_; }
    std::vector<RowCycles>& rows() { return rows_; }
    std::unordered_map<std::uint32_t, Insn>& insns() { return insns_; }
    // Mnemonics not in the table that ran inside an inference.
    std::set<std::string> unpriced() const {
        std::set<std::string> out;
        for (const auto& [a, in] : insns_)
            if (!in.priced && in.executions > 0) out.insert(in.mnemonic);
        return out;
    }

private:
    void finish_listing() {
        if (listing_ && !current_.empty()) blocks_[current_.front()->address] = current_;
        current_.clear();
        listing_ = false;
    }

    // "0x00000040:  f04f 22e0  mov.w    r2, #-0x1fff2000"
    void listed(std::string_view l) {
        const auto colon = l.find(':');
        if (colon == std::string_view::npos) return;
        const std::uint32_t addr = static_cast<std::uint32_t>(std::strtoul(std::string(l.substr(2, colon - 2)).c_str(), nullptr, 16));
        std::size_t at = colon + 1;
        while (at < l.size() && l[at] == ' ') ++at;
        const auto bytes_end = l.find("  ", at);
        if (bytes_end == std::string_view::npos) return;
        std::uint32_t size = 0;
        for (std::size_t i = at; i < bytes_end; ++i)
            if (std::isxdigit(static_cast<unsigned char>(l[i]))) ++size;
        size /= 2;
        std::size_t m = bytes_end;
        while (m < l.size() && l[m] == ' ') ++m;
        std::size_t m_end = m;
        while (m_end < l.size() && l[m_end] != ' ' && l[m_end] != '\t') ++m_end;
        const std::string_view mnemonic = l.substr(m, m_end - m);
        const std::string_view operands = m_end < l.size() ? l.substr(m_end) : std::string_view();
        auto [it, fresh] = insns_.try_emplace(addr);
        Insn& in = it->second;
        if (fresh) {
            in.address = addr;
            in.size = size == 0 ? 2 : size;
            if (auto p = price_instruction(table_, mnemonic, operands)) {
                in.price = *p;
            } else {
                in.price = InstructionPrice{};
                in.priced = false;
                in.mnemonic = std::string(mnemonic);
            }
        }
        if (fresh) {
            std::string base = in.priced ? std::string(mnemonic.substr(0, mnemonic.find('.'))) : "";
            in.call = base.rfind("bl", 0) == 0 && base != "bls" && base != "blt" && base != "ble" && base != "blo";
            const std::string ops(operands);
            in.ret = base.rfind("bx", 0) == 0 ||
                     ((base.rfind("pop", 0) == 0 || base.rfind("ldm", 0) == 0) && ops.find("pc") != std::string::npos) ||
                     (base.rfind("ldr", 0) == 0 && ops.find_first_not_of(' ') != std::string::npos &&
                      ops.substr(ops.find_first_not_of(' '), 2) == "pc");
        }
        current_.push_back(&in);
    }

    // The charge of an instruction at `address` in the current frame.
    Charge charge_of(std::uint32_t address) const {
        const Charge frame = frames_.empty() ? Charge{} : frames_.back();
        const auto o = origins_.find(address);
        if (o == origins_.end()) return frame;  // library code (software float, ...): its caller's charge
        switch (o->second.kind) {
        case Origin::dense: return Charge{Charge::dense, o->second.layer};
        case Origin::activation: return Charge{Charge::activation, o->second.layer};
        case Origin::kernel_function: return frame;
        case Origin::other: return Charge{};
        }
        return frame;
    }

    void account(Insn& in, int cycles) {
        if (!in_row_) return;
        const Charge c = charge_of(in.address);
        if (c.kind == Charge::dense && c.layer >= 0) dense_[static_cast<std::size_t>(c.layer)] += cycles;
        else if (c.kind == Charge::activation && c.layer >= 0) activation_[static_cast<std::size_t>(c.layer)] += cycles;
        else other_ += cycles;
        RowCycles& r = rows_.back();
        r.cycles += cycles;
        ++r.instructions;
        if (block_ >= 0) r.blocks[static_cast<std::size_t>(block_)] += cycles;
        ++in.executions;
        in.cycles += cycles;
    }

    // "Trace 0: 0x7f94f0000100 [00800408/00000040/00000110/ff000200] symbol"
    void executed(std::string_view l) {
        const auto open = l.find('[');
        const auto slash = open == std::string_view::npos ? open : l.find('/', open);
        if (slash == std::string_view::npos) return;
        const std::uint32_t pc = static_cast<std::uint32_t>(std::strtoul(std::string(l.substr(slash + 1, 8)).c_str(), nullptr, 16));
        bool pushed = false;
        if (pending_ != nullptr) {
            const bool taken = pending_->price.always_taken || pc != pending_->address + pending_->size;
            account(*pending_, pending_->price.cycles + (taken ? pending_->price.taken_extra : 0));
            if (taken && pending_->call) {
                // A kernel function called from a layer's dense code is that layer's activation.
                Charge c = charge_of(pending_->address);
                const auto o = origins_.find(pc);
                if (c.kind == Charge::dense && o != origins_.end() && o->second.kind == Origin::kernel_function)
                    c.kind = Charge::activation;
                frames_.push_back(c);
                pushed = true;
            } else if (taken && pending_->ret && !frames_.empty()) {
                frames_.pop_back();
            }
            pending_ = nullptr;
        }
        const bool mark = pc == row_begin_ || pc == row_end_ || pc == block_begin_ || pc == block_end_;
        if (mark && pushed) frames_.pop_back();  // the mark's own return is never seen
        if (pc == row_begin_) {
            frames_.clear();
            rows_.emplace_back();
            in_row_ = true;
            block_ = -1;
            return;
        }
        if (pc == row_end_) {
            in_row_ = false;
            block_ = -1;
            return;
        }
        if (pc == block_begin_) {
            if (in_row_) {
                block_ = static_cast<int>(rows_.back().blocks.size());
                rows_.back().blocks.push_back(0.0);
            }
            return;
        }
        if (pc == block_end_) {
            block_ = -1;
            return;
        }
        const auto b = blocks_.find(pc);
        if (b == blocks_.end()) {
            if (error_.empty()) error_ = fmt::format("the trace runs a block at 0x{:08x} it never listed", pc);
            return;
        }
        const auto& list = b->second;
        for (std::size_t i = 0; i + 1 < list.size(); ++i) account(*list[i], list[i]->price.cycles);
        Insn& last = *list.back();
        if (last.price.taken_extra > 0)
            pending_ = &last;  // priced when the next block shows whether it branched
        else
            account(last, last.price.cycles);
    }

    TimingTable table_;
    std::uint32_t row_begin_, row_end_, block_begin_, block_end_;
    std::unordered_map<std::uint32_t, Insn> insns_;
    std::unordered_map<std::uint32_t, std::vector<Insn*>> blocks_;
    std::vector<Insn*> current_;
    bool listing_ = false;
    Insn* pending_ = nullptr;
    std::unordered_map<std::uint32_t, Origin> origins_;
    std::vector<Charge> frames_;  // the charge each active call inherited
    std::vector<double> dense_, activation_;
    double other_ = 0.0;
    bool in_row_ = false;
    int block_ = -1;
    std::vector<RowCycles> rows_;
    std::string error_;
};

// Runs qemu with its translation log on a pipe (file descriptor 3) that the
// reader consumes as it comes, stdout and stderr into files. Returns the
// exit status, -1 when it could not start, -2 on the time limit.
int run_traced(const std::vector<std::string>& argv, const fs::path& out, const fs::path& err, double limit,
               TraceReader& reader) {
    int fds[2];
    if (pipe(fds) != 0) return -1;
    posix_spawn_file_actions_t fa;
    posix_spawn_file_actions_init(&fa);
    posix_spawn_file_actions_addopen(&fa, 0, "/dev/null", O_RDONLY, 0);
    posix_spawn_file_actions_addopen(&fa, 1, out.c_str(), O_WRONLY | O_CREAT | O_TRUNC, 0644);
    posix_spawn_file_actions_addopen(&fa, 2, err.c_str(), O_WRONLY | O_CREAT | O_TRUNC, 0644);
    // The read end may itself be descriptor 3: close it before the write end goes there.
    posix_spawn_file_actions_addclose(&fa, fds[0]);
    posix_spawn_file_actions_adddup2(&fa, fds[1], 3);
    if (fds[1] != 3) posix_spawn_file_actions_addclose(&fa, fds[1]);
    std::vector<char*> args;
    for (const std::string& a : argv) args.push_back(const_cast<char*>(a.c_str()));
    args.push_back(nullptr);
    pid_t pid = 0;
    const int rc = posix_spawnp(&pid, args[0], &fa, nullptr, args.data(), environ);
    posix_spawn_file_actions_destroy(&fa);
    close(fds[1]);
    if (rc != 0) {
        close(fds[0]);
        return -1;
    }
    const auto start = std::chrono::steady_clock::now();
    std::string buf;
    std::vector<char> chunk(1 << 16);
    bool timed_out = false;
    for (;;) {
        pollfd p{fds[0], POLLIN, 0};
        const int ready = poll(&p, 1, 1000);
        const double elapsed = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
        if (elapsed > limit) {
            kill(pid, SIGKILL);
            timed_out = true;
            break;
        }
        if (ready <= 0) continue;
        const ssize_t n = read(fds[0], chunk.data(), chunk.size());
        if (n <= 0) break;
        buf.append(chunk.data(), static_cast<std::size_t>(n));
        std::size_t from = 0;
        for (std::size_t nl = buf.find('\n', from); nl != std::string::npos; nl = buf.find('\n', from)) {
            reader.line(std::string_view(buf).substr(from, nl - from));
            from = nl + 1;
        }
        buf.erase(0, from);
    }
    close(fds[0]);
    int status = 0;
    waitpid(pid, &status, 0);
    if (timed_out) return -2;
    return WIFEXITED(status) ? WEXITSTATUS(status) : 128 + (WIFSIGNALED(status) ? WTERMSIG(status) : 0);
}

// "fan_balance::(anonymous namespace)::dense_lift(float const*, float*)" -> "dense_lift".
std::string simple_name(std::string f) {
    const std::string anon = "(anonymous namespace)::";
    for (auto at = f.find(anon); at != std::string::npos; at = f.find(anon)) f.erase(at, anon.size());
    std::string s = f.substr(0, f.find('('));
    const auto colons = s.rfind("::");
    return colons == std::string::npos ? s : s.substr(colons + 2);
}

// Activations evaluated through exp or tanh (as cost.cpp counts them).
bool exp_based(Activation a) { return a != Activation::identity && a != Activation::relu && a != Activation::leaky_relu; }

struct LayerUse {
    const Dense* dense = nullptr;
    int block = -1;          // top-level block index
    bool per_eval = false;   // inside a continuous block's field: runs once per field evaluation
    int index = 0;           // in name order
};

void collect_layers(const Block& b, int top, bool per_eval, std::map<std::string, LayerUse>& out) {
    switch (b.kind) {
    case Block::Kind::dense: out[b.dense.name] = LayerUse{&b.dense, top, per_eval}; break;
    case Block::Kind::residual:
        for (const Block& inner : b.residual.body) collect_layers(inner, top, per_eval, out);
        break;
    case Block::Kind::continuous:
        for (const Block& inner : b.continuous.field) collect_layers(inner, top, true, out);
        break;
    }
}

}  // namespace

bool measure_cycles(const Model& model, const std::vector<EmittedFile>& files, const std::vector<CoreClass>& cores,
                    const std::vector<std::vector<double>>& rows, const std::vector<std::vector<long>>& evals_per_block,
                    const CyclesOptions& opts, std::vector<MeasuredCycles>& out, std::string& missing,
                    Diagnostics& diags) {
    const std::string cxx = opts.cross_prefix + "g++";
    const std::string nm = opts.cross_prefix + "nm";
    const std::string addr2line = opts.cross_prefix + "addr2line";
    for (const std::string& tool : {cxx, nm, addr2line, opts.qemu}) {
        if (!on_path(tool)) {
            missing = tool;
            return true;
        }
    }
    if (rows.empty()) {
        diags.error("cost", "no input rows to measure cycles over");
        return false;
    }
    std::string compiler_version = first_line(run_capture(cxx + " -dumpversion 2>/dev/null").value_or(""));
    std::string qemu_version = first_line(run_capture(opts.qemu + " --version 2>/dev/null").value_or(""));
    if (const auto v = qemu_version.find("version "); v != std::string::npos) {
        qemu_version = qemu_version.substr(v + 8);
        qemu_version = qemu_version.substr(0, qemu_version.find(' '));
    }

    // The parts the block hook marks, in order: the top-level blocks; a streaming model's
    // evolution (0), update (1) and readout blocks (2 on).
    std::map<std::string, LayerUse> layers;
    std::vector<std::string> part_names;
    std::vector<int> continuous;
    const int first_readout = model.stream ? 2 : 0;
    if (model.stream) {
        const Stream& st = *model.stream;
        for (const Block& f : st.evolve.field) collect_layers(f, 0, !st.evolve.blend, layers);
        if (!st.evolve.blend) continuous.push_back(0);
        part_names.push_back(st.evolve.name);
        // The GRU cell's halves are the kernels X_ih and X_hh.
        for (const Block& u : st.update_layers) layers[emit_detail::layer_symbol(model, u.dense)] = LayerUse{&u.dense, 1, false};
        part_names.push_back(st.update_name);
    }
    for (std::size_t i = 0; i < model.blocks.size(); ++i) {
        collect_layers(model.blocks[i], first_readout + static_cast<int>(i), false, layers);
        part_names.push_back(block_name(model.blocks[i]));
        if (model.blocks[i].kind == Block::Kind::continuous) continuous.push_back(first_readout + static_cast<int>(i));
    }
    std::map<std::string, int> layer_index;
    for (auto& [name, use] : layers) {
        use.index = static_cast<int>(layer_index.size());
        layer_index[name] = use.index;
    }
    std::set<std::string> kernels;  // the math kernels' function names (runtime/math_float.inc)
    {
        // "inline float NAME(", also after an attribute ("[[gnu::noinline, gnu::cold]] inline ..."):
        // an out-of-line kernel's cycles are its caller's activation, not the rest.
        static const std::regex def(R"(\n(?:\[\[[a-z_:, ]+\]\] )?inline [A-Za-z_:0-9]+ ([A-Za-z_0-9]+)\()");
        const std::string text = emit_detail::kMathFloatText;
        for (auto it = std::sregex_iterator(text.begin(), text.end(), def); it != std::sregex_iterator(); ++it)
            kernels.insert((*it)[1].str());
    }

    const std::string hook = emit_detail::macro_prefix(model.name) + "_BLOCK_HOOK";
    const std::string marks =
        "// Written by meander cost: the emitted block hook calls the driver's mark functions.\n"
        "extern \"C\" void meander_mark_block_begin();\n"
        "extern \"C\" void meander_mark_block_end();\n"
        "#define " + hook + "(name, phase) ((phase) == 0 ? meander_mark_block_begin() : meander_mark_block_end())\n";

    // One core per thread: each builds in its own folder and runs its own emulator.
    auto one = [&](CoreClass core, MeasuredCycles& mc, Diagnostics& core_diags) -> bool {
        const std::string machine = board_of(core);
        if (machine.empty()) return true;
        // Software float runs about 20 times the instructions: the Cortex-M3 takes the first rows only,
        // so that one cost run stays within a minute or so.
        const std::size_t row_cap = opts.learning ? (core == CoreClass::cortex_m3 ? kLearnSoftFloatRows : kLearnRows)
                                                  : (core == CoreClass::cortex_m3 ? kSoftFloatRows : rows.size());
        const std::size_t n_rows = std::min(rows.size(), row_cap);
        const std::size_t marked = opts.learning ? 2 * n_rows : n_rows;  // learning: the forward part, then the step
        std::string inputs;
        for (std::size_t r = 0; r < n_rows; ++r) {
            inputs += "    {";
            for (std::size_t i = 0; i < rows[r].size(); ++i) inputs += fmt::format("{}{:.17g}", i ? ", " : "", rows[r][i]);
            inputs += "},\n";
        }
        const std::string keep = opts.keep_dir.empty() ? "" : (fs::path(opts.keep_dir) / std::string(core_name(core))).string();
        if (!keep.empty()) {
            std::error_code ec;
            fs::create_directories(keep, ec);
        }
        auto folder = WorkFolder::open(keep, "meander-cycles", core_diags);
        if (!folder) return false;
        const fs::path dir = folder->path();
        for (const EmittedFile& f : files)
            if (!write_file_atomic((dir / f.name).string(), f.text, core_diags)) return false;
        const char* const driver = opts.learning ? "board_learn_main.cpp" : "board_main.cpp";
        if (!write_file_atomic((dir / driver).string(), opts.learning ? kBoardLearnMainText : kBoardMainText, core_diags) ||
            !write_file_atomic((dir / "startup.cpp").string(), kStartupText, core_diags) ||
            !write_file_atomic((dir / "mps2.ld").string(), kLinkerScriptText, core_diags) ||
            !write_file_atomic((dir / (opts.learning ? "learn_rows.inc" : "board_inputs.inc")).string(), inputs,
                               core_diags) ||
            !write_file_atomic((dir / "cycle_marks.hpp").string(), marks, core_diags))
            return false;

        std::string flags;
        for (const std::string& f : core_figures(core).cross_flags) flags += f + " ";
        flags += "-std=c++17 -Os -fno-exceptions -fno-rtti -ffunction-sections -fdata-sections -ffp-contract=off";
        const std::string build = fmt::format(
            "cd {} && {} {} -g -I. -DMEANDER_MODEL={} '-DMEANDER_MODEL_HEADER=\"{}.hpp\"' -DMEANDER_CYCLE_MARKS{} "
            "-include cycle_marks.hpp startup.cpp {} {}.cpp -T mps2.ld -nostartfiles --specs=rdimon.specs "
            "-Wl,--gc-sections -o app.elf",
            shell_quote(dir.string()), cxx, flags, model.name, model.name,
            model.stream     ? " -DMEANDER_STREAMING"
            : opts.learning ? fmt::format(" -DMEANDER_RATE={} -DMEANDER_CLIP={}", opts.rate, opts.clip)
                            : std::string(),
            driver, shell_quote(model.name));
        if (!run_logged(build, dir / "build.log")) {
            core_diags.error(cxx, fmt::format("building the emitted code with the board driver for {} failed:{}",
                                         core_name(core), tail_of(dir / "build.log", 12)));
            return false;
        }
        // Symbols: the mark functions and every function's range (Thumb addresses have bit 0 clear here).
        const auto syms = run_capture(fmt::format("{} -S -C --defined-only {} 2>/dev/null", nm, shell_quote((dir / "app.elf").string())));
        if (!syms) {
            core_diags.error(nm, "reading the symbols of the measured image failed");
            return false;
        }
        std::map<std::string, std::uint32_t> marks_at;
        std::vector<std::pair<std::uint32_t, std::uint32_t>> emitted_ranges;  // [start, end) of the model's functions
        {
            std::istringstream in(*syms);
            std::string l;
            while (std::getline(in, l)) {
                std::istringstream f(l);
                std::string addr, size, type, name;
                if (!(f >> addr >> size >> type)) continue;
                std::getline(f, name);
                name = name.empty() ? name : name.substr(1);
                const std::uint32_t at = static_cast<std::uint32_t>(std::strtoul(addr.c_str(), nullptr, 16)) & ~1u;
                if ((type == "t" || type == "T") && name.rfind(model.name + "::", 0) == 0)
                    emitted_ranges.emplace_back(at, at + static_cast<std::uint32_t>(std::strtoul(size.c_str(), nullptr, 16)));
                if (name.rfind("meander_mark_", 0) == 0)
                    marks_at[name] = static_cast<std::uint32_t>(std::strtoul(addr.c_str(), nullptr, 16)) & ~1u;
            }
        }
        for (const char* m : {"meander_mark_row_begin", "meander_mark_row_end", "meander_mark_block_begin", "meander_mark_block_end"}) {
            // A learning image calls the block marks only from the blocks before the first learnable
            // layer: without them the linker drops the marks; address 1 is never a block's start.
            if (opts.learning && !marks_at.count(m) && std::string(m).find("block") != std::string::npos) {
                marks_at[m] = 1u;
                continue;
            }
            if (!marks_at.count(m)) {
                core_diags.error("cost", fmt::format("the measured image has no {} (the board driver was not built with its marks)", m));
                return false;
            }
        }
        // Every halfword of the emitted code's functions: which inlined frames it comes from.
        std::string addrs;
        for (const auto& [lo, hi] : emitted_ranges)
            for (std::uint32_t a = lo; a < hi; a += 2) addrs += fmt::format("0x{:x}\n", a);
        if (!write_file_atomic((dir / "addresses.txt").string(), addrs, core_diags)) return false;
        const auto lines = run_capture(fmt::format("{} -e {} -a -f -i -C < {} 2>/dev/null", addr2line,
                                                   shell_quote((dir / "app.elf").string()),
                                                   shell_quote((dir / "addresses.txt").string())));
        if (!lines) {
            core_diags.error(addr2line, "reading the measured image's line table failed");
            return false;
        }
        std::unordered_map<std::uint32_t, Origin> origins;
        {
            std::istringstream in(*lines);
            std::string l;
            std::uint32_t addr = 0;
            std::vector<std::string> frames;  // innermost first
            int k = 0;
            auto settle = [&]() {
                if (frames.empty()) return;
                Origin o;
                int layer = -1;
                for (const std::string& f : frames) {
                    if (f.rfind("dense_", 0) != 0) continue;
                    const auto li = layer_index.find(f.substr(6));
                    if (li != layer_index.end()) layer = li->second;
                    break;
                }
                // The dense kernels' inlined steps (lanesR_mac and the like, qlanesR_mac for
                // integer layers) are the layer's own code.
                auto step = [](const std::string& f) { return f.rfind("lanes", 0) == 0 || f.rfind("qlanes", 0) == 0; };
                std::size_t own = 0;
                while (own + 1 < frames.size() && step(frames[own])) ++own;
                if (layer >= 0 && frames[own].rfind("dense_", 0) == 0) o = Origin{Origin::dense, layer};
                else if (layer >= 0) o = Origin{Origin::activation, layer};
                else if (kernels.count(frames.back())) o = Origin{Origin::kernel_function, -1};
                origins[addr] = o;
            };
            while (std::getline(in, l)) {
                if (l.rfind("0x", 0) == 0) {
                    settle();
                    addr = static_cast<std::uint32_t>(std::strtoul(l.c_str(), nullptr, 16));
                    frames.clear();
                    k = 0;
                    continue;
                }
                if (k++ % 2 == 0) frames.push_back(simple_name(l));
            }
            settle();
        }
        const TimingTable table = core == CoreClass::cortex_m3 ? TimingTable::cortex_m3 : TimingTable::cortex_m4;
        TraceReader reader(table, marks_at["meander_mark_row_begin"], marks_at["meander_mark_row_end"],
                           marks_at["meander_mark_block_begin"], marks_at["meander_mark_block_end"], std::move(origins),
                           layers.size());
        const std::vector<std::string> argv{opts.qemu, "-M", machine, "-nographic", "-semihosting-config",
                                            "enable=on,target=native", "-kernel", (dir / "app.elf").string(),
                                            "-d", "in_asm,exec,nochain", "-D", "/dev/fd/3"};
        const int status = run_traced(argv, dir / "run.out", dir / "run.err", opts.timeout_seconds, reader);
        if (status == -1) {
            core_diags.error(opts.qemu, "could not start the emulator");
            return false;
        }
        if (status == -2) {
            core_diags.error(opts.qemu, fmt::format("the run on {} did not end within {} s", machine, opts.timeout_seconds));
            return false;
        }
        if (status != 0) {
            core_diags.error(opts.qemu, fmt::format("the run on {} ended with status {}{}{}", machine, status,
                                               status == 1 ? " (build_conditions_hold() is false)" : "",
                                               tail_of(dir / "run.err", 6)));
            return false;
        }
        if (reader.bad()) {
            core_diags.error(opts.qemu, reader.error());
            return false;
        }
        // The driver's lines: "row R RESULT FIELD_EVALS STEPS_TAKEN STEPS_REJECTED".
        std::vector<std::string> results;
        std::vector<long> evals;
        {
            Diagnostics quiet;
            std::istringstream in(read_file((dir / "run.out").string(), quiet).value_or(""));
            std::string l;
            while (std::getline(in, l)) {
                std::istringstream f(l);
                std::string word, result;
                long r = 0, fe = 0;
                if (f >> word >> r >> result >> fe && word == "row") {
                    results.push_back(result);
                    evals.push_back(fe);
                }
            }
        }
        auto& measured_rows = reader.rows();
        if (measured_rows.size() != marked || results.size() != marked) {
            core_diags.error("cost", fmt::format("the run on {} marked {} {} and printed {} rows; {} were given",
                                            machine, measured_rows.size(), opts.learning ? "calls" : "inferences",
                                            results.size(), marked));
            return false;
        }

        mc.core = core;
        mc.machine = machine;
        mc.compiler = fmt::format("{} {} {}", cxx, compiler_version, flags);
        mc.emulator = fmt::format("{} {}", opts.qemu, qemu_version);
        mc.timings = std::string(timing_source(table));
        if (core == CoreClass::cortex_m7)
            mc.timings = "the Cortex-M4 table (no per-instruction table is published for the Cortex-M7; an upper "
                         "bound for its dual-issue pipeline): " + mc.timings;
        mc.rows = static_cast<int>(n_rows);
        const std::set<std::string> unpriced = reader.unpriced();
        mc.unpriced.assign(unpriced.begin(), unpriced.end());
        if (opts.learning) {
            // Even rows: the forward part; odd rows: the learning step. Per-layer figures stay unknown
            // (the learning passes' layers are not the dense kernels the charges follow).
            std::vector<double> fc, fi, sc, si;
            for (std::size_t r = 0; r < measured_rows.size(); ++r) {
                (r % 2 ? sc : fc).push_back(measured_rows[r].cycles);
                (r % 2 ? si : fi).push_back(static_cast<double>(measured_rows[r].instructions));
                if (results[r] != "ok") ++mc.failed_rows;
            }
            mc.cycles = spread_of(sc);
            mc.instructions = spread_of(si);
            mc.forward_cycles = spread_of(fc);
            mc.forward_instructions = spread_of(fi);
            return true;
        }
        std::vector<double> cyc, ins;
        std::size_t nblocks = 0;
        for (std::size_t r = 0; r < measured_rows.size(); ++r) {
            cyc.push_back(measured_rows[r].cycles);
            ins.push_back(static_cast<double>(measured_rows[r].instructions));
            if (results[r] != "ok") ++mc.failed_rows;
            nblocks = std::max(nblocks, measured_rows[r].blocks.size());
        }
        mc.cycles = spread_of(cyc);
        mc.instructions = spread_of(ins);
        for (std::size_t b = 0; b < nblocks && b < part_names.size(); ++b) {
            std::vector<double> v;
            for (const RowCycles& rc : measured_rows)
                if (b < rc.blocks.size()) v.push_back(rc.blocks[b]);
            mc.blocks.push_back({part_names[b], spread_of(v)});
        }

        double all_total = 0.0;
        for (const auto& [a, in] : reader.insns()) all_total += in.cycles;
        // Per row, how often each layer ran.
        double macs = 0.0;
        std::map<std::string, double> act_evals;  // by activation name
        std::map<std::string, double> act_by_kind;
        for (std::size_t r = 0; r < n_rows; ++r) {
            for (const auto& [name, use] : layers) {
                double runs = 1.0;
                if (use.per_eval) {
                    if (continuous.size() == 1)
                        runs = static_cast<double>(evals[r]);
                    else if (r < evals_per_block.size() && static_cast<std::size_t>(use.block) < evals_per_block[r].size())
                        runs = static_cast<double>(evals_per_block[r][static_cast<std::size_t>(use.block)]);
                }
                macs += runs * static_cast<double>(dense_macs(*use.dense));
                if (exp_based(use.dense->act))
                    act_evals[std::string(activation_name(use.dense->act))] += runs * use.dense->out;
            }
        }
        double dense_total = 0.0, act_total = 0.0;
        for (const auto& [name, use] : layers) {
            const std::size_t i = static_cast<std::size_t>(use.index);
            dense_total += reader.dense_cycles()[i];
            act_total += reader.activation_cycles()[i];
            if (exp_based(use.dense->act))
                act_by_kind[std::string(activation_name(use.dense->act))] += reader.activation_cycles()[i];
        }
        double act_counted = 0.0, act_n = 0.0;
        for (const auto& [kind, c] : act_by_kind) {
            const double n = act_evals[kind];
            if (n <= 0) continue;
            mc.activation_cycles[kind] = c / n;
            act_counted += c;
            act_n += n;
        }
        if (act_n > 0) mc.cycles_per_activation = act_counted / act_n;
        if (macs > 0 && dense_total > 0) mc.dense_cycles_per_mac = dense_total / macs;
        mc.other_cycles = (all_total - dense_total - act_total) / static_cast<double>(n_rows);
        mc.dense_cycles_total = dense_total;
        mc.activation_cycles_total = act_total;
        return true;
    };
    std::vector<MeasuredCycles> results(cores.size());
    std::vector<Diagnostics> local(cores.size());
    std::vector<char> ok(cores.size(), 0);
    std::vector<std::thread> threads;
    for (std::size_t i = 0; i < cores.size(); ++i)
        threads.emplace_back([&, i] { ok[i] = one(cores[i], results[i], local[i]) ? 1 : 0; });
    for (std::thread& t : threads) t.join();
    bool all_ok = true;
    for (std::size_t i = 0; i < cores.size(); ++i) {
        for (const Diagnostic& d : local[i].all()) diags.error(d.file, d.message);
        if (!ok[i]) all_ok = false;
        else if (!board_of(cores[i]).empty()) out.push_back(std::move(results[i]));
    }
    return all_ok;
}

}  // namespace meander
