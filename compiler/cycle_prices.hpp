// Cycles of one executed Cortex-M instruction, from the cores' published
// instruction timings (zero wait states):
//   Cortex-M4: Cortex-M4 Technical Reference Manual (ARM DDI 0439), 3.3.1
//              "Table of processor instructions", and the FPU instruction
//              timings (7.2.3, "FPU instruction set", single precision).
//   Cortex-M3: Cortex-M3 Technical Reference Manual (ARM DDI 0337), 18.2
//              (3.3.1 in later issues), "Cortex-M3 instruction set summary".
// Where the table gives a range, the upper end is taken: P (pipeline refill
// after a taken branch, 1 to 3) = 3, divide 12, the M3's long multiplies 5 and
// 7; neighbouring loads and stores are not credited with pipelining, IT is 1
// (not folded), and an instruction whose IT condition fails is priced as if it
// ran. The figures are therefore an upper bound at zero wait states without
// cache effects. The Cortex-M7 manual publishes no per-instruction table: it is
// priced with the Cortex-M4 table, an upper bound for its dual-issue pipeline.
#pragma once

#include <optional>
#include <string>
#include <string_view>

namespace meander {

enum class TimingTable { cortex_m4, cortex_m3 };

struct InstructionPrice {
    int cycles = 1;              // when it does not branch (or always, for a non-branch)
    int taken_extra = 0;         // added when it changes the flow (the next instruction is not the one after it)
    bool always_taken = false;   // unconditional branch: the refill is always paid
};

// `mnemonic` and `operands` as qemu's in_asm log prints them (e.g. "vldr",
// "s15, [r3, #4]"; "popeq", "{r4, pc}"). nullopt: not in the table.
std::optional<InstructionPrice> price_instruction(TimingTable table, std::string_view mnemonic,
                                                  std::string_view operands);

// The document and the rules above, one line, for reports.
std::string_view timing_source(TimingTable table);

}  // namespace meander
