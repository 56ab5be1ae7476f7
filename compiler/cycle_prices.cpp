#include "cycle_prices.hpp"

#include <algorithm>
#include <array>
#include <cctype>
#include <cstdlib>
#include <map>

namespace meander {

namespace {

constexpr int kRefill = 3;   // P: 1 to 3 in both tables; the upper end
constexpr int kDivide = 12;  // SDIV/UDIV: 2 to 12

enum class Kind {
    alu,          // 1 cycle (1 + P with the PC as destination)
    it,           // 1 (may fold to 0)
    mla,          // M4 1, M3 2
    mull,         // M4 1, M3 3 to 5
    mlal,         // M4 1, M3 4 to 7
    divide,       // 2 to 12
    load,         // 2 (2 + P into the PC)
    load_double,  // 1 + N, N = 2
    store,        // 2
    store_double, // 1 + N, N = 2
    multiple,     // LDM/STM/PUSH/POP: 1 + N (+ P when the PC is loaded)
    branch,       // B, B<c>: 1, taken 1 + P
    call,         // BL, BLX, BX: 1 + P
    compare_branch,  // CBZ/CBNZ: 1, taken 1 + P
    table_branch, // TBB/TBH: 2 + P
    barrier,      // DMB/DSB: 1 + B (B >= 0); ISB: 1 + P
    vfp_1,        // VADD, VSUB, VMUL, VNMUL, VABS, VNEG, VCMP, VCVT, VMRS, VMSR, immediate/register VMOV: 1
    vfp_mac,      // VMLA, VMLS, VNMLA, VNMLS, VFMA, VFMS, VFNMA, VFNMS: 3
    vfp_div,      // VDIV, VSQRT: 14
    vfp_mov,      // VMOV between core and FP registers: 2 (one half of a double: 1)
    vfp_ldst,     // VLDR/VSTR: 2 single, 3 double
    vfp_multiple, // VLDM/VSTM/VPUSH/VPOP: 1 + N singles, 1 + 2N doubles
};

const std::map<std::string, Kind>& table() {
    static const std::map<std::string, Kind> t = [] {
        std::map<std::string, Kind> m;
        for (const char* n : {"mov", "movw", "movt", "mvn", "add", "addw", "adc", "adr", "sub", "subw", "sbc", "rsb",
                              "neg", "and", "orr", "eor", "bic", "orn", "tst", "teq", "cmp", "cmn", "lsl", "lsr", "asr",
                              "ror", "rrx", "clz", "rbit", "rev", "rev16", "revsh", "ubfx", "sbfx", "bfi", "bfc", "uxtb",
                              "uxth", "sxtb", "sxth", "uxtab", "uxtah", "sxtab", "sxtah", "uxtb16", "sxtb16", "ssat",
                              "usat", "ssat16", "usat16", "nop", "sev", "yield", "mul", "sel", "qadd", "qsub", "qdadd",
                              "qdsub", "sadd16", "sadd8", "uadd16", "uadd8", "ssub16", "ssub8", "usub16", "usub8",
                              "smulbb", "smulbt", "smultb", "smultt", "smulwb", "smulwt", "smmul", "smmulr", "smuad",
                              "smusd", "smlabb", "smlabt", "smlatb", "smlatt", "smlawb", "smlawt", "smlad", "smlsd",
                              "smmla", "smmls", "usad8", "usada8", "cpsie", "cpsid", "mrs", "msr", "svc", "bkpt",
                              "wfi", "wfe", "clrex", "pkhbt", "pkhtb"})
            m[n] = Kind::alu;
        for (const char* n : {"mla", "mls"}) m[n] = Kind::mla;
        for (const char* n : {"smull", "umull"}) m[n] = Kind::mull;
        for (const char* n : {"smlal", "umlal", "umaal", "smlalbb", "smlald", "smlsld"}) m[n] = Kind::mlal;
        for (const char* n : {"sdiv", "udiv"}) m[n] = Kind::divide;
        for (const char* n : {"ldr", "ldrb", "ldrh", "ldrsb", "ldrsh", "ldrt", "ldrbt", "ldrht", "ldrsbt", "ldrsht",
                              "ldrex", "ldrexb", "ldrexh"})
            m[n] = Kind::load;
        m["ldrd"] = Kind::load_double;
        for (const char* n : {"str", "strb", "strh", "strt", "strbt", "strht", "strex", "strexb", "strexh"}) m[n] = Kind::store;
        m["strd"] = Kind::store_double;
        for (const char* n : {"ldm", "ldmia", "ldmfd", "ldmdb", "ldmea", "stm", "stmia", "stmea", "stmdb", "stmfd", "push",
                              "pop"})
            m[n] = Kind::multiple;
        m["b"] = Kind::branch;
        for (const char* n : {"bl", "blx", "bx"}) m[n] = Kind::call;
        for (const char* n : {"cbz", "cbnz"}) m[n] = Kind::compare_branch;
        for (const char* n : {"tbb", "tbh"}) m[n] = Kind::table_branch;
        for (const char* n : {"dmb", "dsb", "isb"}) m[n] = Kind::barrier;
        for (const char* n : {"vadd", "vsub", "vmul", "vnmul", "vabs", "vneg", "vcmp", "vcmpe", "vcvt", "vcvtr", "vcvtb",
                              "vcvtt", "vcvta", "vcvtn", "vcvtp", "vcvtm", "vmrs", "vmsr", "vmaxnm", "vminnm", "vrinta",
                              "vrintn", "vrintp", "vrintm", "vrintz", "vrintr", "vrintx", "vseleq", "vselge", "vselgt",
                              "vselvs"})
            m[n] = Kind::vfp_1;
        for (const char* n : {"vmla", "vmls", "vnmla", "vnmls", "vfma", "vfms", "vfnma", "vfnms"}) m[n] = Kind::vfp_mac;
        for (const char* n : {"vdiv", "vsqrt"}) m[n] = Kind::vfp_div;
        m["vmov"] = Kind::vfp_mov;
        for (const char* n : {"vldr", "vstr"}) m[n] = Kind::vfp_ldst;
        for (const char* n : {"vldm", "vldmia", "vldmdb", "vstm", "vstmia", "vstmdb", "vpush", "vpop"})
            m[n] = Kind::vfp_multiple;
        return m;
    }();
    return t;
}

bool ends_with(std::string_view s, std::string_view tail) {
    return s.size() > tail.size() && s.substr(s.size() - tail.size()) == tail;
}

constexpr std::array<std::string_view, 17> kConditions{"eq", "ne", "cs", "hs", "cc", "lo", "mi", "pl", "vs",
                                                       "vc", "hi", "ls", "ge", "lt", "gt", "le", "al"};

// The table's name for a mnemonic, and whether it carried a condition.
std::optional<std::pair<Kind, bool>> lookup(std::string base) {
    const auto& t = table();
    auto find = [&](const std::string& s) -> std::optional<Kind> {
        const auto it = t.find(s);
        if (it == t.end()) return std::nullopt;
        return it->second;
    };
    // IT, ITT, ITE, ITTE, ...: an IT instruction.
    if (base.size() >= 2 && base.size() <= 5 && base.compare(0, 2, "it") == 0 &&
        std::all_of(base.begin() + 2, base.end(), [](char c) { return c == 't' || c == 'e'; }))
        return std::make_pair(Kind::it, false);
    if (auto k = find(base)) return std::make_pair(*k, false);
    if (ends_with(base, "s"))
        if (auto k = find(base.substr(0, base.size() - 1))) return std::make_pair(*k, false);
    for (std::string_view c : kConditions) {
        if (!ends_with(base, c)) continue;
        const std::string stem = base.substr(0, base.size() - 2);
        if (auto k = find(stem)) return std::make_pair(*k, c != "al");
        if (ends_with(stem, "s"))
            if (auto k = find(stem.substr(0, stem.size() - 1))) return std::make_pair(*k, c != "al");
    }
    return std::nullopt;
}

std::string trim(std::string_view s) {
    std::size_t a = 0, b = s.size();
    while (a < b && std::isspace(static_cast<unsigned char>(s[a]))) ++a;
    while (b > a && std::isspace(static_cast<unsigned char>(s[b - 1]))) --b;
    return std::string(s.substr(a, b - a));
}

std::string first_operand(std::string_view operands) {
    const auto comma = operands.find(',');
    return trim(operands.substr(0, comma));
}

// Registers in a braced list: "{r4, r5, pc}", "{r4-r7, lr}", "{d8-d10}";
// a d register counts 2 when `double_words` is set.
int list_registers(std::string_view operands, bool double_words, bool& has_pc) {
    has_pc = false;
    const auto open = operands.find('{');
    const auto close = operands.find('}');
    if (open == std::string_view::npos || close == std::string_view::npos || close < open) return 1;
    const std::string_view list = operands.substr(open + 1, close - open - 1);
    int n = 0;
    std::size_t at = 0;
    while (at <= list.size()) {
        const auto comma = list.find(',', at);
        const std::string item = trim(list.substr(at, comma == std::string_view::npos ? std::string_view::npos : comma - at));
        at = comma == std::string_view::npos ? list.size() + 1 : comma + 1;
        if (item.empty()) continue;
        if (item == "pc") has_pc = true;
        int count = 1;
        const auto dash = item.find('-');
        if (dash != std::string::npos && item.size() > dash + 1) {
            const int lo = std::atoi(item.c_str() + 1);
            const int hi = std::atoi(item.c_str() + dash + 2);
            if (hi >= lo) count = hi - lo + 1;
        }
        const bool d = item[0] == 'd';
        n += count * (d && double_words ? 2 : 1);
    }
    return n > 0 ? n : 1;
}

}  // namespace

std::optional<InstructionPrice> price_instruction(TimingTable tab, std::string_view mnemonic, std::string_view operands) {
    std::string m;
    for (char c : mnemonic) m += static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
    // Width qualifiers (.n, .w) and the VFP data type (.f32, .f64, .f32.s32) do not change the table entry.
    std::string dt;
    if (const auto dot = m.find('.'); dot != std::string::npos) {
        dt = m.substr(dot + 1);
        m.resize(dot);
    }
    if (dt == "n" || dt == "w") dt.clear();
    const auto found = lookup(m);
    if (!found) return std::nullopt;
    const auto [kind, conditional] = *found;
    const bool m4 = tab == TimingTable::cortex_m4;
    const bool vfp = m.size() > 1 && m[0] == 'v';
    if (vfp && !m4) return std::nullopt;  // the Cortex-M3 has no FPU
    const std::string dest = first_operand(operands);
    const bool to_pc = dest == "pc";
    InstructionPrice p;
    switch (kind) {
    case Kind::alu:
        p.cycles = 1;
        if (to_pc) p.taken_extra = kRefill, p.always_taken = !conditional;
        break;
    case Kind::it: p.cycles = 1; break;
    case Kind::mla: p.cycles = m4 ? 1 : 2; break;
    case Kind::mull: p.cycles = m4 ? 1 : 5; break;
    case Kind::mlal: p.cycles = m4 ? 1 : 7; break;
    case Kind::divide: p.cycles = kDivide; break;
    case Kind::load:
        p.cycles = 2;
        if (to_pc) p.taken_extra = kRefill, p.always_taken = !conditional;
        break;
    case Kind::load_double: p.cycles = 3; break;
    case Kind::store: p.cycles = 2; break;
    case Kind::store_double: p.cycles = 3; break;
    case Kind::multiple: {
        bool pc = false;
        p.cycles = 1 + list_registers(operands, false, pc);
        if (pc && (m.compare(0, 2, "ld") == 0 || m == "pop")) p.taken_extra = kRefill, p.always_taken = !conditional;
        break;
    }
    case Kind::branch:
        p.cycles = 1;
        p.taken_extra = kRefill;
        p.always_taken = !conditional;
        break;
    case Kind::call:
        p.cycles = 1;
        p.taken_extra = kRefill;
        p.always_taken = !conditional;
        break;
    case Kind::compare_branch:
        p.cycles = 1;
        p.taken_extra = kRefill;
        break;
    case Kind::table_branch:
        p.cycles = 2;
        p.taken_extra = kRefill;
        p.always_taken = true;
        break;
    case Kind::barrier:
        p.cycles = 1 + (m == "isb" ? kRefill : 0);
        break;
    case Kind::vfp_1: p.cycles = 1; break;
    case Kind::vfp_mac: p.cycles = 3; break;
    case Kind::vfp_div: p.cycles = 14; break;
    case Kind::vfp_mov: {
        // Core register(s) <-> FP register(s): 2; half of a double (d0[1]), immediate or FP to FP: 1.
        const bool core = operands.find('r') != std::string_view::npos && operands.find('[') == std::string_view::npos &&
                          operands.find('#') == std::string_view::npos;
        p.cycles = core ? 2 : 1;
        break;
    }
    case Kind::vfp_ldst: p.cycles = dt == "64" || dest.rfind('d', 0) == 0 ? 3 : 2; break;
    case Kind::vfp_multiple: {
        bool pc = false;
        p.cycles = 1 + list_registers(operands, true, pc);
        break;
    }
    }
    return p;
}

std::string_view timing_source(TimingTable t) {
    if (t == TimingTable::cortex_m3)
        return "Cortex-M3 Technical Reference Manual (ARM DDI 0337), 18.2 instruction set summary; zero wait states, "
               "ranges at their upper end (P = 3, divide 12, UMULL/SMULL 5, UMLAL/SMLAL 7), no load/store pipelining "
               "credit, IT 1 cycle";
    return "Cortex-M4 Technical Reference Manual (ARM DDI 0439), 3.3.1 table of processor instructions and 7.2.3 FPU "
           "instruction timings; zero wait states, ranges at their upper end (P = 3, divide 12), no load/store "
           "pipelining credit, IT 1 cycle";
}

}  // namespace meander
