#include "verify.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <sstream>

#include "../runtime/evaluate.hpp"
#include "../runtime/gradient.hpp"
#include "../runtime/integrate.hpp"
#include "../runtime/tableau.hpp"
#include "board_files.hpp"
#include "cost_object.hpp"

namespace meander {

namespace fs = std::filesystem;

double default_tolerance(Precision p) { return p == Precision::float32 ? 1e-4 : 1e-10; }

const std::vector<std::string>& verify_boards() {
    static const std::vector<std::string> b{"cortex-m4f", "cortex-m3", "cortex-m7", "arm-linux"};
    return b;
}

int differing_outputs(const VerifyReport& a, const VerifyReport& b, int& first_row, int& first_col) {
    int n = 0;
    first_row = first_col = -1;
    for (std::size_t r = 0; r < a.emitted.size() && r < b.emitted.size(); ++r) {
        const auto& x = a.emitted[r];
        const auto& y = b.emitted[r];
        for (std::size_t c = 0; c < std::max(x.size(), y.size()); ++c) {
            const bool same = c < x.size() && c < y.size() && std::memcmp(&x[c], &y[c], sizeof(double)) == 0;
            if (same) continue;
            if (n++ == 0) {
                first_row = static_cast<int>(r);
                first_col = static_cast<int>(c);
            }
        }
    }
    return n;
}

namespace {

std::string literal(double v, Precision p) {
    // Rows may hold NaN or infinities (the emitted code must answer input_not_finite):
    // spelled through numeric_limits, since C++ has no literal for them.
    if (std::isnan(v)) return "std::numeric_limits<real_t>::quiet_NaN()";
    if (std::isinf(v)) return v > 0 ? "std::numeric_limits<real_t>::infinity()" : "-std::numeric_limits<real_t>::infinity()";
    if (p == Precision::float64) {
        std::string s = format_double(v);
        if (s.find_first_of(".eEn") == std::string::npos) s += ".0";
        return s;
    }
    std::string s = format_float(static_cast<float>(v));
    if (s.find_first_of(".eEn") == std::string::npos) s += ".0";
    return s + "f";
}

// A driver that runs every input row and prints, per row, the result code,
// the counters and the outputs with enough digits to round-trip. With `rows`
// (a streaming model's sequence file) it resets at the first row of each
// sequence and observes every row with its gap.
std::string driver_source(const Model& m, const std::vector<std::vector<double>>& inputs, Precision p,
                          const std::vector<SequenceRow>* rows = nullptr) {
    std::string s;
    s += fmt::format("#include \"{}.hpp\"\n#include <cstdio>\n#include <limits>\n\n", m.name);
    s += fmt::format("using real_t = {}::real;\n\n", m.name);
    s += fmt::format("static const {0}::real kInputs[{1}][{2}] = {{\n", m.name, inputs.size(), m.input_size);
    for (const auto& row : inputs) {
        s += "    {";
        for (std::size_t i = 0; i < row.size(); ++i) s += (i ? ", " : "") + literal(row[i], p);
        s += "},\n";
    }
    s += "};\n\n";
    std::string call = fmt::format("{0}::result res = {0}::infer(ctx, kInputs[r], out);", m.name);
    if (rows) {
        s += fmt::format("static const {0}::real kGaps[{1}] = {{", m.name, rows->size());
        for (std::size_t i = 0; i < rows->size(); ++i) s += (i ? ", " : "") + literal((*rows)[i].gap, p);
        s += fmt::format("}};\nstatic const bool kFirst[{}] = {{", rows->size());
        for (std::size_t i = 0; i < rows->size(); ++i) s += std::string(i ? ", " : "") + ((*rows)[i].first ? "true" : "false");
        s += "};\n\n";
        call = fmt::format("if (kFirst[r]) {0}::reset(ctx);\n        {0}::result res = {0}::observe(ctx, kInputs[r], kGaps[r], out);",
                           m.name);
    }
    s += fmt::format(
        "int main() {{\n"
        "    static {0}::context ctx;\n"
        "    {0}::real out[{0}::output_size];\n"
        "    for (unsigned r = 0; r < {1}u; ++r) {{\n"
        "        {3}\n"
        "        std::printf(\"%u %u %u %u\", static_cast<unsigned>(res), static_cast<unsigned>(ctx.count.field_evals),\n"
        "                    static_cast<unsigned>(ctx.count.steps_accepted), static_cast<unsigned>(ctx.count.steps_rejected));\n"
        "        for (unsigned i = 0; i < {0}::output_size; ++i) std::printf(\" %.{2}g\", static_cast<double>(out[i]));\n"
        "        std::printf(\"\\n\");\n"
        "    }}\n"
        "    return 0;\n"
        "}}\n",
        m.name, inputs.size(), p == Precision::float32 ? 9 : 17, call);
    return s;
}

std::uint64_t bits_of(double v) {
    std::uint64_t u = 0;
    std::memcpy(&u, &v, sizeof u);
    return u;
}

unsigned status_code(EvalStatus s) {
    // The emitted result enumerators carry the same order (DEVELOPERS.md, emitted API).
    return static_cast<unsigned>(s);
}

}  // namespace

namespace {

// Builds the emitted files and the driver under the strict flags, runs the driver, compares its
// rows with the reference results (one per row).
std::optional<VerifyReport> build_and_compare(const Model& model, const std::vector<EmittedFile>& files,
                                              const std::string& driver, const std::vector<EvalResult>& refs, Precision p,
                                              const VerifyOptions& opts, bool bits, Diagnostics& diags);

}  // namespace

std::optional<VerifyReport> verify_model(const Model& model, const EmitOptions& emit_opts,
                                         const std::vector<std::vector<double>>& inputs,
                                         const VerifyOptions& opts, Diagnostics& diags) {
    std::vector<EvalResult> refs;
    for (const auto& row : inputs)
        refs.push_back(evaluate(model, Eigen::Map<const Eigen::VectorXd>(row.data(), static_cast<Eigen::Index>(row.size()))));
    auto rep = build_and_compare(model, emit_model(model, emit_opts), driver_source(model, inputs, emit_opts.precision), refs,
                                 emit_opts.precision, opts, emit_opts.precision == Precision::float64, diags);
    if (!rep || emit_opts.precision != Precision::float32) return rep;
    // Rows whose adaptive steps differ: the reference's step decisions again, with their
    // error norms (the recorded forward pass gives each continuous block's input state).
    for (int r : rep->counter_rows) {
        const auto& row = inputs[static_cast<std::size_t>(r)];
        const ForwardRecord fr = forward_record(model, Eigen::Map<const Eigen::VectorXd>(row.data(), static_cast<Eigen::Index>(row.size())),
                                                GradientWay::discrete);
        VerifyReport::Tipped best;
        bool found = false;
        for (std::size_t b = 0; b < model.blocks.size() && b < fr.blocks.size(); ++b) {
            if (model.blocks[b].kind != Block::Kind::continuous) continue;
            const Continuous& c = model.blocks[b].continuous;
            const Tableau* tb = find_tableau(c.solver.method);
            if (tb == nullptr || !tb->adaptive()) continue;
            Eigen::VectorXd y = fr.blocks[b].x;
            IntegrateStats st;
            std::vector<StepRecord> trace;
            const Field field = [&c](double t, const Eigen::VectorXd& s, Eigen::VectorXd& ds) { eval_field(c, t, s, ds); };
            integrate(field, c.t0, c.t1, y, c.solver, st, &trace);
            for (const StepRecord& a : trace) {
                if (!(a.err > 0.0)) continue;
                if (found && std::fabs(std::log(a.err)) >= std::fabs(std::log(best.err))) continue;
                found = true;
                best.errs.clear();
                for (const StepRecord& e : trace) best.errs.push_back(e.err);
                best.block = c.name;
                best.t = a.t;
                best.h = a.h;
                best.err = a.err;
                best.accepted = a.accepted;
            }
        }
        if (!found) continue;
        best.row = r;
        best.emitted_evals = rep->row_field_evals[static_cast<std::size_t>(r)];
        best.eval_evals = refs[static_cast<std::size_t>(r)].stats.field_evals;
        rep->tipped.push_back(best);
    }
    return rep;
}

std::optional<VerifyReport> verify_stream(const Model& model, const EmitOptions& emit_opts, const std::vector<SequenceRow>& rows,
                                          const VerifyOptions& opts, Diagnostics& diags) {
    std::vector<std::vector<double>> inputs;
    for (const auto& r : rows) inputs.push_back(r.values);
    return build_and_compare(model, emit_stream(model, emit_opts), driver_source(model, inputs, emit_opts.precision, &rows),
                             evaluate_sequences(model, rows), emit_opts.precision, opts,
                             emit_opts.precision == Precision::float64, diags);
}

namespace {

std::optional<VerifyReport> build_and_compare(const Model& model, const std::vector<EmittedFile>& files,
                                              const std::string& driver, const std::vector<EvalResult>& refs, Precision p,
                                              const VerifyOptions& opts, bool bits, Diagnostics& diags) {
    auto folder = WorkFolder::open(opts.keep_dir, "meander-verify", diags);
    if (!folder) return std::nullopt;
    const fs::path dir = folder->path();

    for (const auto& f : files)
        if (!write_file_atomic((dir / f.name).string(), f.text, diags)) return std::nullopt;
    if (!write_file_atomic((dir / "verify_driver.cpp").string(), driver, diags)) return std::nullopt;

    std::string cxx = opts.cxx;
    if (cxx.empty()) {
        const char* env = std::getenv("CXX");
        cxx = env && *env ? env : "c++";
    }
    std::optional<std::string> out;
    if (opts.board.empty()) {
        // A bare-metal compiler has no C library start-up or system calls to link the driver with.
        if (cxx.find("none-eabi") != std::string::npos) {
            diags.error(cxx, "a bare-metal cross compiler cannot build the verify driver for this machine; to run the "
                             "emitted code on an emulated microcontroller use --board cortex-m4f, cortex-m3 or "
                             "cortex-m7 (or --board arm-linux for 32-bit ARM Linux under qemu-arm)");
            return std::nullopt;
        }
        // The flags users are told to build with: the emitted code must pass them.
        std::string cmd = fmt::format(
            "{} -std=c++17 -O2 -ffp-contract=off -Wall -Wextra -Wconversion -Wdouble-promotion -Wshadow -Wfloat-equal -Werror "
            "-fno-exceptions -fno-rtti "
            "-o {} {} {} > {} 2>&1",
            cxx, shell_quote((dir / "verify_driver").string()), shell_quote((dir / "verify_driver.cpp").string()),
            shell_quote((dir / (model.name + ".cpp")).string()), shell_quote((dir / "build.log").string()));
        if (std::system(cmd.c_str()) != 0) {
            std::string log;
            Diagnostics quiet;
            if (auto text = read_file((dir / "build.log").string(), quiet)) log = *text;
            if (log.size() > 4000) log = log.substr(0, 4000) + "\n[...]";
            diags.error(cxx, fmt::format("building the emitted code failed:\n{}", log));
            return std::nullopt;
        }
        out = run_capture(shell_quote((dir / "verify_driver").string()));
        if (!out) {
            diags.error((dir / "verify_driver").string(), "the verify driver did not run to completion");
            return std::nullopt;
        }
    } else {
        // The board builds of tests/target/run_target.sh: the core's flags, -Os, the project's
        // start-up code and linker script on bare metal; -O2 -static for ARM Linux.
        const bool linux_user = opts.board == "arm-linux";
        std::string flags, machine;
        if (opts.board == "cortex-m4f") flags = "-mcpu=cortex-m4 -mthumb -mfpu=fpv4-sp-d16 -mfloat-abi=hard", machine = "mps2-an386";
        else if (opts.board == "cortex-m3") flags = "-mcpu=cortex-m3 -mthumb -mfloat-abi=soft", machine = "mps2-an385";
        else if (opts.board == "cortex-m7") flags = "-mcpu=cortex-m7 -mthumb -mfpu=fpv5-sp-d16 -mfloat-abi=hard", machine = "mps2-an500";
        else if (!linux_user) {
            diags.error("verify", fmt::format("unknown board '{}' (known: cortex-m4f, cortex-m3, cortex-m7, arm-linux)", opts.board));
            return std::nullopt;
        }
        const std::string bcxx = linux_user ? "arm-linux-gnueabihf-g++" : "arm-none-eabi-g++";
        const std::string emu = linux_user ? opts.qemu_user : opts.qemu_system;
        for (const std::string& tool : {emu, bcxx, std::string("timeout")}) {
            if (!on_path(tool)) {
                diags.error("verify", fmt::format("--board {} needs {} on PATH, which is missing (scripts/install-target-tools "
                                                  "installs the cross tool chains and qemu); nothing was run",
                                                  opts.board, tool));
                return std::nullopt;
            }
        }
        std::string cmd;
        if (linux_user) {
            cmd = fmt::format("cd {} && {} -std=c++17 -O2 -ffp-contract=off -static -fno-exceptions -fno-rtti -o app "
                              "verify_driver.cpp {}.cpp > build.log 2>&1",
                              shell_quote(dir.string()), bcxx, shell_quote(model.name));
        } else {
            if (!write_file_atomic((dir / "startup.cpp").string(), kStartupText, diags) ||
                !write_file_atomic((dir / "mps2.ld").string(), kLinkerScriptText, diags))
                return std::nullopt;
            cmd = fmt::format("cd {} && {} {} -std=c++17 -Os -ffp-contract=off -fno-exceptions -fno-rtti -ffunction-sections "
                              "-fdata-sections startup.cpp verify_driver.cpp {}.cpp -T mps2.ld -nostartfiles "
                              "--specs=rdimon.specs -Wl,--gc-sections -o app > build.log 2>&1",
                              shell_quote(dir.string()), bcxx, flags, shell_quote(model.name));
        }
        if (std::system(cmd.c_str()) != 0) {
            std::string log;
            Diagnostics quiet;
            if (auto text = read_file((dir / "build.log").string(), quiet)) log = *text;
            if (log.size() > 4000) log = log.substr(0, 4000) + "\n[...]";
            diags.error(bcxx, fmt::format("building the emitted code for {} failed:\n{}", opts.board, log));
            return std::nullopt;
        }
        const std::string app = shell_quote((dir / "app").string());
        const std::string run =
            linux_user ? fmt::format("timeout 600 {} {}", emu, app)
                       : fmt::format("timeout 600 {} -M {} -nographic -semihosting-config enable=on,target=native -kernel {}",
                                     emu, machine, app);
        out = run_capture(run + " < /dev/null");
        if (!out) {
            diags.error(emu, fmt::format("the verify driver did not run to completion on {}", opts.board));
            return std::nullopt;
        }
    }

    VerifyReport rep;
    rep.rows = static_cast<int>(refs.size());
    rep.outputs = model.output_size;
    rep.tolerance = opts.tolerance >= 0 ? opts.tolerance : default_tolerance(p);
    rep.counters_must_match = p == Precision::float64;
    rep.bits_must_match = bits;
    std::istringstream lines(*out);
    for (std::size_t r = 0; r < refs.size(); ++r) {
        std::string line;
        if (!std::getline(lines, line)) {
            diags.error("verify", fmt::format("the driver printed {} rows, expected {}", r, refs.size()));
            return std::nullopt;
        }
        std::istringstream fields(line);
        unsigned status = 0, evals = 0, taken = 0, rejected = 0;
        fields >> status >> evals >> taken >> rejected;
        rep.field_evals += evals;
        rep.row_field_evals.push_back(static_cast<long>(evals));
        rep.steps_accepted += taken;
        rep.steps_rejected += rejected;
        const EvalResult& ref = refs[r];
        rep.eval_field_evals += ref.stats.field_evals;
        if (static_cast<long>(evals) != ref.stats.field_evals || static_cast<long>(taken) != ref.stats.steps_accepted ||
            static_cast<long>(rejected) != ref.stats.steps_rejected) {
            if (rep.counter_mismatches == 0) {
                rep.first_counter_row = static_cast<int>(r);
                const long got[3] = {static_cast<long>(evals), static_cast<long>(taken), static_cast<long>(rejected)};
                const long want[3] = {ref.stats.field_evals, ref.stats.steps_accepted, ref.stats.steps_rejected};
                std::copy(got, got + 3, rep.first_counter_emitted);
                std::copy(want, want + 3, rep.first_counter_eval);
            }
            ++rep.counter_mismatches;
            rep.counter_rows.push_back(static_cast<int>(r));
        }
        rep.emitted.emplace_back();
        rep.reference.emplace_back();
        rep.reference_status.emplace_back(eval_status_name(ref.status));
        rep.emitted_status.emplace_back(status <= 5 ? eval_status_name(static_cast<EvalStatus>(status)) : "unknown");
        if (status != status_code(ref.status)) {
            ++rep.status_mismatches;
            continue;
        }
        if (ref.status != EvalStatus::ok) continue;
        ++rep.compared_rows;
        for (int c = 0; c < model.output_size; ++c) {
            std::string tok;
            fields >> tok;
            double got = std::strtod(tok.c_str(), nullptr);
            double want = ref.output[c];
            rep.emitted.back().push_back(got);
            rep.reference.back().push_back(want);
            double abs_err = std::fabs(got - want);
            // The driver prints 17 significant digits: strtod gives back the exact double.
            if (bits && bits_of(got) != bits_of(want)) {
                if (rep.bit_mismatches == 0) {
                    rep.first_bits_row = static_cast<int>(r);
                    rep.first_bits_col = c;
                    rep.first_bits_emitted = got;
                    rep.first_bits_eval = want;
                }
                ++rep.bit_mismatches;
            }
            if (!bits && !(abs_err <= rep.tolerance * std::max(1.0, std::fabs(want)))) ++rep.failures;
            if (!(abs_err <= rep.max_abs)) {
                rep.max_abs = abs_err;
                rep.max_abs_row = static_cast<int>(r);
                rep.max_abs_col = c;
            }
            if (want != 0.0 && !(abs_err / std::fabs(want) <= rep.max_rel)) {
                rep.max_rel = abs_err / std::fabs(want);
                rep.max_rel_row = static_cast<int>(r);
                rep.max_rel_col = c;
            }
        }
    }
    return rep;
}

}  // namespace

namespace {

std::string hex_bits(double v) {
    std::uint64_t u = 0;
    std::memcpy(&u, &v, sizeof u);
    return fmt::format("0x{:016x}", u);
}

}  // namespace

std::string render_verify(const VerifyReport& r, Precision p) {
    std::string s;
    const int both_failed = r.rows - r.compared_rows - r.status_mismatches;
    s += fmt::format("rows                 {}", r.rows);
    if (r.compared_rows != r.rows) s += fmt::format(" ({} compared, {} with the same result other than ok in both)",
                                                    r.compared_rows, both_failed);
    s += "\n";
    s += fmt::format("outputs per row      {}\n", r.outputs);
    s += fmt::format("precision            {}\n", p == Precision::float32 ? "float32" : "float64");
    s += fmt::format("largest abs. error   {:.3g} (row {}, output {})\n", r.max_abs, r.max_abs_row + 1, r.max_abs_col);
    s += fmt::format("largest rel. error   {:.3g} (row {}, output {}; |emitted - eval| / |eval|)\n", r.max_rel,
                     r.max_rel_row + 1, r.max_rel_col);
    if (r.bits_must_match)
        s += "required             equal bits for every output, equal counters\n";
    else
        s += fmt::format("tolerance            {:.3g} x max(1, |eval|){}\n", r.tolerance,
                         r.tolerance == default_tolerance(p) ? " (default for this precision)" : "");
    s += fmt::format("field evaluations    emitted {}, eval {}\n", r.field_evals, r.eval_field_evals);
    s += fmt::format("steps                {} accepted, {} rejected\n", r.steps_accepted, r.steps_rejected);
    if (r.counter_mismatches)
        s += fmt::format("counters             {} rows took other steps than eval{}\n", r.counter_mismatches,
                         r.counters_must_match ? "" : " (float rounding can change an accept/reject decision)");
    bool near_one = false, far = false;
    for (const VerifyReport::Tipped& t : r.tipped) {
        std::vector<std::string> errs;
        for (std::size_t i = 0; i < t.errs.size() && i < 12; ++i) errs.push_back(fmt::format("{:.4g}", t.errs[i]));
        if (t.errs.size() > 12) errs.push_back("...");
        const bool close = std::fabs(t.err - 1.0) < 0.05;
        (close ? near_one : far) = true;
        s += fmt::format("  row {}: emitted {} field evaluations, eval {}; eval's error norms in {}: {}; nearest 1: {:.6f} "
                         "at t = {:.6g}, h = {:.3g} ({})\n",
                         t.row + 1, t.emitted_evals, t.eval_evals, t.block, fmt::join(errs, ", "), t.err, t.t, t.h,
                         t.accepted ? "accepted" : "rejected");
    }
    if (near_one)
        s += "  a decision with an error norm this close to 1 can go the other way in float32\n";
    if (far)
        s += "  where no norm lies near 1, float32 rounding changed a step size (the controller's factor from a small "
             "error norm) and the steps end elsewhere\n";
    if (!r.tipped.empty())
        s += "  what to do: emit with --precision float64 (the same steps and bits as eval), or give the block a "
             "fixed-step solver (meander tune names the cheapest that meets an error target)\n";
    if (r.counter_mismatches && r.counters_must_match)
        s += fmt::format("first counters       row {}: emitted {} field evaluations, {} accepted, {} rejected; eval {}, {}, {}\n",
                         r.first_counter_row + 1, r.first_counter_emitted[0], r.first_counter_emitted[1],
                         r.first_counter_emitted[2], r.first_counter_eval[0], r.first_counter_eval[1],
                         r.first_counter_eval[2]);
    if (r.bit_mismatches)
        s += fmt::format("bits                 {} outputs differ from eval; first: row {}, output {}: emitted {} ({:a}), "
                         "eval {} ({:a})\n",
                         r.bit_mismatches, r.first_bits_row + 1, r.first_bits_col, hex_bits(r.first_bits_emitted),
                         r.first_bits_emitted, hex_bits(r.first_bits_eval), r.first_bits_eval);
    if (r.status_mismatches) s += fmt::format("result codes         {} rows differ from eval\n", r.status_mismatches);
    if (r.compared_rows == 0)
        return s + "verdict              NOTHING COMPARED: no row returned ok in both the emitted code and eval\n";
    const std::string outputs_failed = r.bits_must_match ? fmt::format("{} outputs with other bits", r.bit_mismatches)
                                                         : fmt::format("{} outputs beyond tolerance", r.failures);
    s += fmt::format("verdict              {}\n", r.passed() ? "agrees" : fmt::format("DISAGREES ({}, {} result codes, {} counters)", outputs_failed,
                                                              r.status_mismatches, r.counters_must_match ? r.counter_mismatches : 0));
    return s;
}

std::string render_verify_rows(const VerifyReport& r) {
    std::string s = fmt::format("{:>4}  {:>16}  {:>16}  {:>10}\n", "row", "emitted", "eval", "abs. error");
    for (std::size_t i = 0; i < r.emitted.size(); ++i) {
        if (r.emitted[i].empty()) {
            if (r.emitted_status[i] == r.reference_status[i])
                s += fmt::format("{:>4}  both returned {}: nothing to compare\n", i + 1, r.emitted_status[i]);
            else
                s += fmt::format("{:>4}  emitted code returned {}, eval {}\n", i + 1, r.emitted_status[i],
                                 r.reference_status[i]);
            continue;
        }
        for (std::size_t c = 0; c < r.emitted[i].size(); ++c)
            s += fmt::format("{:>4}  {:>16.9g}  {:>16.9g}  {:>10.2e}\n", c == 0 ? fmt::format("{}", i + 1) : "",
                             r.emitted[i][c], r.reference[i][c], std::fabs(r.emitted[i][c] - r.reference[i][c]));
    }
    return s;
}

}  // namespace meander
