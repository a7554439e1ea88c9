/*
 * startup.c - reset and exception entry for the hosttool firmware on Cortex-M
 * (ARMv6-M and ARMv7-M), for use with -nostartfiles --specs=rdimon.specs and
 * cortex_m.ld.
 *
 * Reset copies .data from its load address, zeroes .bss, opens the semihosting
 * stdin/stdout/stderr with initialise_monitor_handles() and returns main()'s
 * value as the exit status through exit() (flushing stdio), which under QEMU
 * with semihosting becomes qemu's exit status.
 *
 * Any fault or unexpected interrupt ends the program with exit status
 * HT_FAULT_EXIT_STATUS instead of hanging, so a crash under the emulator shows
 * up as a failed run, not as a timeout.
 */
#include <stdint.h>
#include <stdlib.h>

#include "ht_cycles.h"

/* Exit status reported when the core takes a fault or a stray exception. */
#define HT_FAULT_EXIT_STATUS 125

/* Symbols from cortex_m.ld. */
extern uint32_t ht_data_load[];
extern uint32_t ht_data_start[];
extern uint32_t ht_data_end[];
extern uint32_t ht_bss_start[];
extern uint32_t ht_bss_end[];
extern uint32_t ht_stack_top[];

/* From the program and from newlib's librdimon. */
extern int main(void);
extern void initialise_monitor_handles(void);

void ht_reset_handler(void);
void ht_fault_handler(void);

/* newlib calls these around constructors; C99 firmware has none. */
void _init(void);
void _fini(void);
void _init(void) {}
void _fini(void) {}

/* Number of entries: 16 system exceptions, no external interrupts used. */
#define HT_VECTOR_COUNT 16u

typedef void (*ht_vector_t)(void);

/*
 * Vector table, placed first in the image by cortex_m.ld. Entry 0 is the
 * initial stack pointer; converting an object address to a function pointer
 * type is not ISO C, so the table holds addresses as integers instead.
 */
__attribute__((section(".ht_vectors"), used))
static const uintptr_t ht_vectors[HT_VECTOR_COUNT] = {
    (uintptr_t)ht_stack_top,
    (uintptr_t)ht_reset_handler,
    (uintptr_t)ht_fault_handler, /* NMI */
    (uintptr_t)ht_fault_handler, /* HardFault */
    (uintptr_t)ht_fault_handler, /* MemManage (v7-M) */
    (uintptr_t)ht_fault_handler, /* BusFault (v7-M) */
    (uintptr_t)ht_fault_handler, /* UsageFault (v7-M) */
    0u, 0u, 0u, 0u,              /* reserved */
    (uintptr_t)ht_fault_handler, /* SVCall */
    (uintptr_t)ht_fault_handler, /* DebugMonitor (v7-M) */
    0u,                          /* reserved */
    (uintptr_t)ht_fault_handler, /* PendSV */
    (uintptr_t)ht_cycles_systick_handler, /* SysTick */
};

void ht_reset_handler(void)
{
    const uint32_t *src = ht_data_load;
    uint32_t *dst;

    for (dst = ht_data_start; dst < ht_data_end; ++dst) {
        *dst = *src;
        ++src;
    }
    for (dst = ht_bss_start; dst < ht_bss_end; ++dst) {
        *dst = 0u;
    }
    initialise_monitor_handles();
    exit(main());
}

void ht_fault_handler(void)
{
    _Exit(HT_FAULT_EXIT_STATUS);
}
