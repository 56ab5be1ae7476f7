// The instruction prices of `meander cost`'s measured cycles against the cores'
// published tables: Cortex-M4 Technical Reference Manual (ARM DDI 0439), 3.3.1
// and the FPU timings in 7.2.3; Cortex-M3 Technical Reference Manual (ARM DDI
// 0337), instruction set summary. P (pipeline refill) is taken at the tables'
// upper end, 3; other ranges at their upper end too.
#include <gtest/gtest.h>

#include "compiler/cycle_prices.hpp"

using namespace meander;

namespace {

int cycles(TimingTable t, const char* m, const char* ops, bool taken = false) {
    const auto p = price_instruction(t, m, ops);
    EXPECT_TRUE(p) << m << " " << ops;
    if (!p) return -1;
    return p->cycles + (taken || p->always_taken ? p->taken_extra : 0);
}

constexpr auto M4 = TimingTable::cortex_m4;
constexpr auto M3 = TimingTable::cortex_m3;

}  // namespace

TEST(CyclePrices, CortexM4Table) {
    // DDI 0439 3.3.1: data processing 1, MLA 1, UMULL 1, SDIV 2 to 12, LDR 2, LDRD 1 + N,
    // PUSH 1 + N, POP with the PC 1 + N + P, B 1 + P, B<cond> 1 or 1 + P, BL 1 + P, IT 1.
    EXPECT_EQ(cycles(M4, "adds", "r0, r1, #1"), 1);
    EXPECT_EQ(cycles(M4, "add.w", "r0, r1, r2, lsl #2"), 1);
    EXPECT_EQ(cycles(M4, "mla", "r0, r1, r2, r3"), 1);
    EXPECT_EQ(cycles(M4, "umull", "r0, r1, r2, r3"), 1);
    EXPECT_EQ(cycles(M4, "udiv", "r0, r1, r2"), 12);
    EXPECT_EQ(cycles(M4, "ldr", "r3, [r2, #4]"), 2);
    EXPECT_EQ(cycles(M4, "ldrd", "r2, r3, [r0]"), 3);
    EXPECT_EQ(cycles(M4, "str.w", "r3, [r2, #0xd88]"), 2);
    EXPECT_EQ(cycles(M4, "push", "{r4, r5, r6, lr}"), 5);
    EXPECT_EQ(cycles(M4, "pop", "{r4, r5, r6, pc}"), 1 + 4 + 3);
    EXPECT_EQ(cycles(M4, "push.w", "{r4, r5, r6, r7, r8, lr}"), 7);
    EXPECT_EQ(cycles(M4, "b", "#0x100"), 4);
    EXPECT_EQ(cycles(M4, "bne", "#0x100"), 1);
    EXPECT_EQ(cycles(M4, "bne", "#0x100", true), 4);
    EXPECT_EQ(cycles(M4, "bls", "#0x100", true), 4);
    EXPECT_EQ(cycles(M4, "bl", "#0x1afc"), 4);
    EXPECT_EQ(cycles(M4, "bx", "lr"), 4);
    EXPECT_EQ(cycles(M4, "cbz", "r3, #0x40"), 1);
    EXPECT_EQ(cycles(M4, "itte", "hi"), 1);
    EXPECT_EQ(cycles(M4, "movhi", "r2, #0"), 1);
    EXPECT_EQ(cycles(M4, "bics", "r2, r2, #3"), 1);
    EXPECT_EQ(cycles(M4, "mov", "pc, lr"), 4);
}

TEST(CyclePrices, CortexM4Fpu) {
    // DDI 0439 7.2.3 (single precision): VADD/VMUL 1, VMLA/VFMA 3, VDIV/VSQRT 14,
    // VLDR 2 (3 for a double), VMOV core <-> single 2, VPUSH 1 + N (1 + 2N for doubles).
    EXPECT_EQ(cycles(M4, "vadd.f32", "s15, s15, s14"), 1);
    EXPECT_EQ(cycles(M4, "vmul.f32", "s15, s15, s14"), 1);
    EXPECT_EQ(cycles(M4, "vmla.f32", "s15, s14, s13"), 3);
    EXPECT_EQ(cycles(M4, "vfma.f32", "s15, s14, s13"), 3);
    EXPECT_EQ(cycles(M4, "vdiv.f32", "s15, s14, s13"), 14);
    EXPECT_EQ(cycles(M4, "vsqrt.f32", "s15, s14"), 14);
    EXPECT_EQ(cycles(M4, "vldr", "s15, [r3, #4]"), 2);
    EXPECT_EQ(cycles(M4, "vldr", "d7, [r3]"), 3);
    EXPECT_EQ(cycles(M4, "vstr", "s15, [r3]"), 2);
    EXPECT_EQ(cycles(M4, "vmov", "r0, s15"), 2);
    EXPECT_EQ(cycles(M4, "vmov.f32", "s15, #1.000000e+00"), 1);
    EXPECT_EQ(cycles(M4, "vmov.f32", "s14, s15"), 1);
    EXPECT_EQ(cycles(M4, "vpush", "{s16, s17, s18}"), 4);
    EXPECT_EQ(cycles(M4, "vpush", "{d8, d9}"), 5);
    EXPECT_EQ(cycles(M4, "vcmpe.f32", "s15, #0"), 1);
    EXPECT_EQ(cycles(M4, "vmrs", "APSR_nzcv, fpscr"), 1);
    EXPECT_EQ(cycles(M4, "vcvt.f32.s32", "s15, s15"), 1);
}

TEST(CyclePrices, CortexM3Table) {
    // DDI 0337: MLA 2, UMULL 3 to 5, UMLAL 4 to 7, the rest as on the Cortex-M4; no FPU.
    EXPECT_EQ(cycles(M3, "mla", "r0, r1, r2, r3"), 2);
    EXPECT_EQ(cycles(M3, "umull", "r0, r1, r2, r3"), 5);
    EXPECT_EQ(cycles(M3, "umlal", "r0, r1, r2, r3"), 7);
    EXPECT_EQ(cycles(M3, "ldr", "r3, [r2, #4]"), 2);
    EXPECT_EQ(cycles(M3, "clz", "r3, r2"), 1);
    EXPECT_FALSE(price_instruction(M3, "vadd.f32", "s15, s15, s14"));
    EXPECT_FALSE(price_instruction(M4, "frobnicate", "r0"));
}
