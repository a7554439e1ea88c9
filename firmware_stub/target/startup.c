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

/* One vector table entry: the initial stack pointer or a handler address. */
typedef union {
    const void *stack;
    void (*handler)(void);
} ht_vector_t;

/* Vector table, placed first in the image by cortex_m.ld. */
__attribute__((section(".ht_vectors"), used))
static const ht_vector_t ht_vectors[HT_VECTOR_COUNT] = {
    { .stack = ht_stack_top },
    { .handler = ht_reset_handler },
    { .handler = ht_fault_handler }, /* NMI */
    { .handler = ht_fault_handler }, /* HardFault */
    { .handler = ht_fault_handler }, /* MemManage (v7-M) */
    { .handler = ht_fault_handler }, /* BusFault (v7-M) */
    { .handler = ht_fault_handler }, /* UsageFault (v7-M) */
    { .stack = 0 }, { .stack = 0 }, { .stack = 0 }, { .stack = 0 }, /* reserved */
    { .handler = ht_fault_handler }, /* SVCall */
    { .handler = ht_fault_handler }, /* DebugMonitor (v7-M) */
    { .stack = 0 },                  /* reserved */
    { .handler = ht_fault_handler }, /* PendSV */
    { .handler = ht_cycles_systick_handler }, /* SysTick */
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
