// Start-up code for the MPS2 boards under qemu (Cortex-M3, -M4 and -M7).
// newlib's own crt0 asks the semihosting host for a stack address that lies
// outside these boards' RAM and locks the core up, so the images are linked
// with -nostartfiles and start here instead.
#include <cstdint>
#include <cstdlib>

extern "C" {
extern std::uint32_t __data_start__, __data_end__, __data_load__;
extern std::uint32_t __bss_start__, __bss_end__;
extern std::uint32_t __stack_top__;

void initialise_monitor_handles(void);
void __libc_init_array(void);
// The program's main, under a name C++ lets us call (calling `main` itself is
// ill-formed); the asm label binds it to the symbol `main`.
int meander_program_main(void) __asm__("main");

// __libc_init_array calls _init and exit calls _fini; the crt files that
// normally bring them are not linked.
void _init(void) {}
void _fini(void) {}

[[noreturn]] void meander_reset(void);
[[noreturn]] void meander_fault(void);
}

[[noreturn]] void meander_reset(void) {
#if defined(__ARM_FP)
    // Grant full access to coprocessors 10 and 11 (the FPU) in CPACR before
    // the first floating-point instruction; dsb/isb make it take effect.
    volatile std::uint32_t* const cpacr = reinterpret_cast<volatile std::uint32_t*>(0xE000ED88u);
    *cpacr = *cpacr | (0xFu << 20);
    __asm volatile("dsb\n\tisb" ::: "memory");
#endif
    std::uint32_t* src = &__data_load__;
    for (std::uint32_t* dst = &__data_start__; dst < &__data_end__;) *dst++ = *src++;
    for (std::uint32_t* dst = &__bss_start__; dst < &__bss_end__;) *dst++ = 0u;
#if !defined(MEANDER_NO_SEMIHOSTING)
    initialise_monitor_handles();
#endif
    __libc_init_array();
#if defined(MEANDER_NO_SEMIHOSTING)
    // Images that only prove what is linked never run: stop here.
    static_cast<void>(meander_program_main());
    for (;;) {}
#else
    std::exit(meander_program_main());
#endif
}

// Any fault or unexpected interrupt: report through semihosting when it is
// there, so a failing run ends instead of spinning until the timeout.
[[noreturn]] void meander_fault(void) {
#if !defined(MEANDER_NO_SEMIHOSTING)
    std::_Exit(125);
#else
    for (;;) {}
#endif
}

namespace {
using Handler = void (*)(void);
}

// Word 0: initial stack pointer; word 1: reset; then the core's exceptions
// (NMI, HardFault, MemManage, BusFault, UsageFault, 4 reserved, SVCall,
// DebugMonitor, reserved, PendSV, SysTick).
extern "C" __attribute__((section(".vectors"), used)) const Handler meander_vectors[16] = {
    reinterpret_cast<Handler>(&__stack_top__),
    meander_reset,
    meander_fault, meander_fault, meander_fault, meander_fault, meander_fault,
    nullptr, nullptr, nullptr, nullptr,
    meander_fault, meander_fault, nullptr, meander_fault, meander_fault,
};
