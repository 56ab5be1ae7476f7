// Verify: build the emitted code with the host compiler, run it on inputs and
// compare every output with the reference evaluator.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "../runtime/model.hpp"
#include "emit.hpp"
#include "sequence.hpp"
#include "source.hpp"

namespace meander {

struct VerifyOptions {
    double tolerance = -1.0;        // < 0: the default for the precision (default_tolerance)
    std::string cxx;                // host compiler; empty: $CXX, else "c++"
    std::string keep_dir;           // non-empty: build there and keep the files
    // Non-empty: build for this target and run there instead of on the host:
    // "cortex-m4f", "cortex-m3", "cortex-m7" (arm-none-eabi-g++ with the project's
    // bare-metal start-up code and linker script, run on qemu-system-arm's MPS2
    // boards) or "arm-linux" (arm-linux-gnueabihf-g++ -static, run under qemu-arm).
    std::string board;
    std::string qemu_system = "qemu-system-arm";   // the emulators --board runs (names on PATH)
    std::string qemu_user = "qemu-arm";
};


// The stated default: a deviation fails when |emitted - eval| > tol * max(1, |eval|).
// float32: 1e-4 (float carries ~7 digits; errors grow through the layers and
// the steps of a continuous block, and an adaptive solver in float can take
// slightly different steps); float64: 1e-10.
double default_tolerance(Precision p);

struct VerifyReport {
    int rows = 0;
    int outputs = 0;
    double tolerance = 0.0;
    double max_abs = 0.0;           // largest |emitted - eval|
    int max_abs_row = 0, max_abs_col = 0;
    double max_rel = 0.0;           // largest |emitted - eval| / |eval| (where eval != 0)
    int max_rel_row = 0, max_rel_col = 0;
    int failures = 0;               // outputs beyond the tolerance
    int status_mismatches = 0;      // rows whose result code differs from eval's status
    int counter_mismatches = 0;     // rows whose field evaluations or steps differ from eval's
    bool counters_must_match = false;  // float64: the same arithmetic must take the same steps
    // float64 (not streaming models yet): every output must equal eval's bit for bit
    // (DEVELOPERS.md, "Operation order"); the tolerance is then not used.
    bool bits_must_match = false;
    int bit_mismatches = 0;         // outputs whose bits differ from eval's
    int first_bits_row = -1, first_bits_col = -1;  // the first of them (0-based)
    double first_bits_emitted = 0.0, first_bits_eval = 0.0;
    int first_counter_row = -1;     // the first row whose counters differ (0-based)
    long first_counter_emitted[3] = {0, 0, 0}, first_counter_eval[3] = {0, 0, 0};  // evals, taken, rejected
    long field_evals = 0, steps_accepted = 0, steps_rejected = 0;  // emitted code, summed over rows
    long eval_field_evals = 0;      // reference evaluator, summed over rows
    std::vector<std::vector<double>> emitted, reference;  // per row (empty where a row returned no result)
    std::vector<std::string> emitted_status, reference_status;  // per row: result names ("ok", "step_limit", ...)
    int compared_rows = 0;          // rows where both returned ok and every output was compared
    std::vector<int> counter_rows;  // rows (0-based) whose counters differ from eval's
    std::vector<long> row_field_evals;  // the emitted code's field evaluations per row
    // float32 rows that took other steps than eval: per row, the reference's
    // accept/reject decision whose error norm lay nearest 1 (what rounding in
    // float can tip the other way).
    struct Tipped {
        int row = 0;
        std::string block;                   // the adaptive block holding the attempt nearest 1
        double t = 0.0, h = 0.0, err = 0.0;  // that attempt: start, step, scaled error norm
        bool accepted = false;               // eval's decision (err < 1)
        long emitted_evals = 0, eval_evals = 0;
        std::vector<double> errs;            // every attempt's error norm in that block, in order
    };
    std::vector<Tipped> tipped;
    // Agreement needs something to agree on: at least one row compared.
    bool passed() const {
        return compared_rows > 0 && failures == 0 && status_mismatches == 0 &&
               (!counters_must_match || counter_mismatches == 0) && (!bits_must_match || bit_mismatches == 0);
    }
};

// The targets `verify --board` knows.
const std::vector<std::string>& verify_boards();

// Outputs whose values differ between two reports of the same rows (the driver
// prints 9 significant digits for float, 17 for double: equal values are equal
// bits); `first_row`, `first_col` get the first (0-based).
int differing_outputs(const VerifyReport& a, const VerifyReport& b, int& first_row, int& first_col);

std::optional<VerifyReport> verify_model(const Model& model, const EmitOptions& emit_opts,
                                         const std::vector<std::vector<double>>& inputs,
                                         const VerifyOptions& opts, Diagnostics& diags);

// A streaming model over a sequence file: reset at each new sequence, observe every row.
std::optional<VerifyReport> verify_stream(const Model& model, const EmitOptions& emit_opts, const std::vector<SequenceRow>& rows,
                                          const VerifyOptions& opts, Diagnostics& diags);

std::string render_verify(const VerifyReport& r, Precision p);
// Every row: the emitted code's outputs beside eval's.
std::string render_verify_rows(const VerifyReport& r);

}  // namespace meander
