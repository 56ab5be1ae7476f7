// Parse: description text -> Model. The grammar (grammar/meander.hpp) is the
// parser; the actions only store what it matched. Errors: the control
// reports a must<> failure with its message from grammar/errors.hpp, then the
// nearest statement attempt catches it, the grammar's skip rules move on to
// the next statement, and parsing goes on, so one run reports several errors.
//
// This file keeps the control and the entry point. The actions are
// specialisations of one action<> template, and every one must be visible where
// pegtl::parse is instantiated, so they live in headers grouped by statement
// (parse/actions_*.hpp) included here only; the shared state is parse/state.hpp,
// and the non-template helpers are in parse/order.cpp, solver.cpp and naming.cpp.
#include "parse.hpp"

#include <fmt/format.h>

#include <string>
#include <type_traits>

#include <tao/pegtl.hpp>

#include "../grammar/errors.hpp"
#include "../grammar/meander.hpp"
#include "parse/actions_blocks.hpp"
#include "parse/actions_storage.hpp"
#include "parse/actions_layers.hpp"
#include "parse/actions_solver.hpp"
#include "parse/actions_stream.hpp"
#include "parse/actions_top.hpp"
#include "parse/actions_vectors.hpp"
#include "parse/state.hpp"

namespace meander {

namespace parse_detail {
namespace {

// ---- control: messages at must<> points, recovery at statement attempts -------

template <typename Rule>
struct control : pegtl::normal<Rule> {
    template <typename ParseInput>
    [[noreturn]] static void raise(const ParseInput& in, State& s) {
        static_assert(g::error_message<Rule> != nullptr, "a must<> point without a message in grammar/errors.hpp");
        std::size_t at = next_token(s.src, static_cast<std::size_t>(in.current() - s.src.text.data()));
        std::string message = g::error_message<Rule>;
        if constexpr (std::is_same_v<Rule, g::string_close>) at = s.string_open;
        if constexpr (std::is_same_v<Rule, g::string_escape_char>)  // at the backslash
            at = static_cast<std::size_t>(in.current() - s.src.text.data()) - 1;
        if constexpr (std::is_same_v<Rule, g::close_brace>) {
            s.abandon_blocks = true;
            if (!s.open.empty()) {
                const Block& b = s.open.back().block;
                message = fmt::format(g::unclosed_block, kind_name(b), block_name(b), block_loc(b).line);
            }
        }
        s.error(s.src.loc_of(at), message);
        throw pegtl::parse_error(message, in);
    }

    template <pegtl::apply_mode A, pegtl::rewind_mode M, template <typename...> class Action,
              template <typename...> class Control, typename ParseInput>
    [[nodiscard]] static bool match(ParseInput& in, State& s) {
        if constexpr (std::is_same_v<Rule, g::top_attempt> || std::is_same_v<Rule, g::body_attempt>) {
            // The error is already reported; forget the half-built statement and let the skip rule
            // that follows in the grammar resume from the statement's first token.
            const std::size_t depth = s.open.size();
            auto marker = in.template mark<pegtl::rewind_mode::required>();
            try {
                return marker(pegtl::normal<Rule>::template match<A, pegtl::rewind_mode::active, Action, Control>(in, s));
            } catch (const pegtl::parse_error&) {
                if constexpr (std::is_same_v<Rule, g::body_attempt>) {
                    if (s.abandon_blocks) throw;
                }
                s.abandon_blocks = false;
                s.open.erase(s.open.begin() + static_cast<std::ptrdiff_t>(depth), s.open.end());
                return false;
            }
        } else if constexpr (std::is_same_v<Rule, g::skip_group>) {
            if (s.skip_depth >= kMaxSkipNesting) return false;
            ++s.skip_depth;
            bool r = false;
            try {
                r = pegtl::normal<Rule>::template match<A, M, Action, Control>(in, s);
            } catch (...) {
                --s.skip_depth;
                throw;
            }
            --s.skip_depth;
            return r;
        } else {
            return pegtl::normal<Rule>::template match<A, M, Action, Control>(in, s);
        }
    }
};

}  // namespace
}  // namespace parse_detail

std::optional<Model> parse_description(const Source& src, Diagnostics& diags) {
    using namespace parse_detail;
    const int errors_before = diags.error_count();
    if (src.text.size() > kMaxDescriptionBytes) {
        diags.error(src.path, fmt::format("the description is {} bytes long; at most {} (8 MiB) are read",
                                          src.text.size(), kMaxDescriptionBytes));
        return std::nullopt;
    }
    State s(src, diags);
    pegtl::memory_input<> in(src.text.data(), src.text.data() + src.text.size(), src.path);
    try {
        (void)pegtl::parse<g::description, action, control>(in, s);
    } catch (const pegtl::parse_error&) {
        // Already reported by the control (a missing model line cannot be skipped).
        return std::nullopt;
    } catch (const TooManyBlocks&) {
        return std::nullopt;
    }
    if (diags.error_count() != errors_before) return std::nullopt;
    // Missing statements are reported only for an otherwise clean description: after a
    // syntax error the skipped text may have held them.
    Loc end = src.loc_of(next_token(src, src.text.size()));
    if (s.input_stmt.line == 0) diags.error(src, end, "missing 'input NAME[N]' statement (it comes after 'model' and 'weights')");
    if (s.output_stmt.line == 0) diags.error(src, end, "missing 'output NAME[N]' statement at the end of the description");
    if (s.model.stream && !s.model.stream->has_evolve)
        diags.error(src, s.model.stream->loc, fmt::format("streaming model '{}' has no evolution: after 'state', a continuous block "
                                                          "over [0, gap] or a blend",
                                                          s.model.name));
    else if (s.model.stream && s.model.stream->update == Stream::Update::none)
        diags.error(src, s.model.stream->loc, fmt::format("streaming model '{}' has no update: after the evolution, a 'gated' or "
                                                          "'merge' layer",
                                                          s.model.name));
    if (diags.error_count() != errors_before) return std::nullopt;
    return std::move(s.model);
}

}  // namespace meander
