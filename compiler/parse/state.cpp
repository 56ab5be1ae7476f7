// The parse state's non-template helpers (parse/state.hpp).
#include "state.hpp"

namespace meander::parse_detail {

BodyTensors& body_tensors(Block& b) { return b.kind == Block::Kind::residual ? b.residual.tensors : b.continuous.tensors; }

std::string_view kind_name(const Block& b) {
    if (b.kind == Block::Kind::continuous && b.continuous.blend) return "blend";
    return b.kind == Block::Kind::residual ? "residual" : "continuous";
}

Loc block_loc(const Block& b) {
    return b.kind == Block::Kind::residual ? b.residual.loc : b.continuous.loc;
}

// Offset of the next token at or after `offset` (blanks and comments skipped),
// so a caret points at the offending character. At the end of the text the
// caret goes right after the last character that is not a blank.
std::size_t next_token(const Source& src, std::size_t offset) {
    pegtl::memory_input<> rest(src.text.data() + offset, src.text.data() + src.text.size(), "");
    (void)pegtl::parse<g::sep>(rest);
    std::size_t at = static_cast<std::size_t>(rest.current() - src.text.data());
    if (at == src.text.size()) {
        at = offset;
        while (at > 0 && (src.text[at - 1] == ' ' || src.text[at - 1] == '\t' || src.text[at - 1] == '\n' || src.text[at - 1] == '\r')) --at;
    }
    return at;
}

}  // namespace meander::parse_detail
