// Statement order and placement (parse/order.hpp).
#include "order.hpp"

#include <fmt/format.h>

#include <string>

namespace meander::parse_detail {

// Every top-level statement but the model line: nothing may follow the output.
void top_level_statement(State& s, Loc stmt) {
    if (s.output_stmt.line > 0 && !s.reported_after_output) {
        s.reported_after_output = true;
        s.error(stmt, fmt::format("this statement follows the 'output' statement of line {}; 'output' must be the last statement", s.output_stmt.line));
    }
}

// A layer or block placed in the current body (or at the top level).
void placed(State& s, Loc stmt, std::string_view what) {
    if (++s.layers_and_blocks > kMaxLayersAndBlocks) {
        const std::string message = fmt::format("{} is beyond the limit of {} layers and blocks in a description; "
                                                "parsing stops here",
                                                what, kMaxLayersAndBlocks);
        s.error(stmt, message);
        throw TooManyBlocks{};
    }
    if (s.open.empty()) {
        top_level_statement(s, stmt);
        if (s.model.stream && s.model.stream->update == Stream::Update::none && !s.have_blocks)
            s.error(stmt, fmt::format("{} comes before the update of the streaming model; the readout follows the evolution and "
                                      "the update ('gated' or 'merge')",
                                      what));
        s.have_blocks = true;
        return;
    }
    Frame& f = s.open.back();
    if (f.block.kind == Block::Kind::continuous && (f.solver_loc.line > 0 || f.trained_loc.line > 0))
        s.error(stmt, fmt::format("{} comes after the solver line of continuous '{}'; the field's layers come first", what, f.block.continuous.name));
    f.any_statement = true;
    f.any_layer = true;
}

// The continuous block a body statement (augment, solver, trained-with) belongs to, or null after an error.
Frame* continuous_frame(State& s, Loc stmt, std::string_view keyword) {
    if (!s.open.empty() && s.open.back().block.kind == Block::Kind::continuous && s.open.back().block.continuous.blend) {
        s.error(stmt, fmt::format("'{}' is not allowed in blend '{}': the blend is a closed form and needs no solver", keyword,
                                  s.open.back().block.continuous.name));
        return nullptr;
    }
    if (s.open.empty() || s.open.back().block.kind != Block::Kind::continuous) {
        if (s.open.empty())
            s.error(stmt, fmt::format("'{}' is allowed only inside a continuous block", keyword));
        else
            s.error(stmt, fmt::format("'{}' is allowed only inside a continuous block, not in residual '{}'", keyword, s.open.back().block.residual.name));
        return nullptr;
    }
    return &s.open.back();
}

// The evolution of a streaming model: right after 'state', before the update and the readout.
void place_evolution(State& s, Loc stmt, Block& b) {
    top_level_statement(s, stmt);
    Continuous& c = b.continuous;
    const std::string what = fmt::format("{} '{}'", kind_name(b), c.name);
    if (!s.model.stream) {
        s.error(stmt, fmt::format("{} evolves over the gap between observations, which needs a 'state' statement before it "
                                  "(a streaming model)",
                                  what));
        return;
    }
    Stream& st = *s.model.stream;
    if (st.has_evolve) {
        s.error(stmt, fmt::format("{} is a second evolution; streaming model '{}' already evolves by {} '{}' (line {})", what,
                                  s.model.name, st.evolve.blend ? "blend" : "continuous",
                                  st.evolve.name, st.evolve.loc.line));
        return;
    }
    if (st.update != Stream::Update::none || s.have_blocks) {
        s.error(stmt, fmt::format("{} must come right after the 'state' statement, before the update and the readout", what));
        return;
    }
    st.has_evolve = true;
    st.evolve = std::move(c);
}

}  // namespace meander::parse_detail
