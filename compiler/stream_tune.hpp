// Tune for a streaming model: the cheapest solver budget for its evolution,
// per observation. Over a sequence file, each candidate (steps-per-unit for
// fixed-step methods, decades of rtol for adaptive ones) is compared with a
// tight reference on every observation; its cost is the worst case at the
// largest gap (what the time budget must hold) beside the measured mean and
// largest field evaluations per observation.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "../runtime/model.hpp"
#include "sequence.hpp"
#include "source.hpp"
#include "tune.hpp"

namespace meander {

struct StreamTuneCandidate {
    SolverSpec spec;
    bool ok = false;                // every observation evaluated with result ok
    std::string failure;            // when !ok: the result name
    int failure_row = -1;           // when !ok: 0-based row of the sequence file
    double deviation = 0.0;         // largest |out - ref| / max(1, |ref|) over every observation and output
    long worst_field_evals = 0;     // per observation, at the largest gap
    double mean_field_evals = 0.0;  // measured over the observations
    long max_field_evals = 0;
    bool meets = false;
    // One observation's estimated cycles at worst on the report's core with this
    // solver in the evolution (stream cost's static estimate; float32 only).
    std::optional<double> worst_cycles;
};

struct StreamTune {
    std::string model;
    std::string evolution;
    double target = 0.0;
    double largest_gap = 0.0;
    int rows = 0;
    std::string core;               // the core of the candidates' worst_cycles
    SolverSpec reference;
    StreamTuneCandidate deployed;
    std::vector<StreamTuneCandidate> candidates;
    std::optional<std::size_t> chosen;    // the cheapest (worst case) that meets the target
    std::string solver_line;
};

std::optional<StreamTune> tune_stream(const Model& model, const std::vector<SequenceRow>& rows, const TuneOptions& opts,
                                      Diagnostics& diags);
std::string render_stream_tune_text(const StreamTune& t);
std::string render_stream_tune_json(const StreamTune& t);

}  // namespace meander
