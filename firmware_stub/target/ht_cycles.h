/*
 * ht_cycles.h - instruction counter for Cortex-M targets, built on SysTick.
 * Target only (needs the SysTick registers of ARMv6-M / ARMv7-M).
 *
 * SysTick runs from the processor clock (CSR CLKSOURCE = 1) with the largest
 * 24-bit reload value, and its interrupt counts reloads, so the count is a
 * 64-bit number of SysTick ticks that does not wrap in practice. On real
 * hardware a tick is one core clock cycle.
 *
 * Under QEMU with `-icount shift=0` each instruction takes 1 ns of virtual
 * time and the mps2 boards clock SysTick at 25 MHz, so one tick is
 * HT_CYCLES_QEMU_INSNS_PER_TICK instructions, the same on every run: a
 * deterministic instruction count with a resolution of 40 instructions.
 * Averaging the difference of two reads over many repetitions recovers a
 * finer figure, since the phase of the tick moves from one repetition to the
 * next.
 *
 * Usage: call ht_cycles_start() once, then time a piece of code as the
 * difference of two ht_cycles_read() values. A read costs a few tens of
 * instructions; measure an empty interval to know the overhead.
 */
#ifndef HT_CYCLES_H
#define HT_CYCLES_H

#include <stdint.h>

/* Instructions per SysTick tick under qemu-system-arm -icount shift=0, mps2. */
#define HT_CYCLES_QEMU_INSNS_PER_TICK 40u

/* Start SysTick with its period interrupt; the count starts near zero. */
void ht_cycles_start(void);

/* SysTick ticks since ht_cycles_start(); monotonic. */
uint64_t ht_cycles_read(void);

/* SysTick exception handler; referenced from the vector table in startup.c. */
void ht_cycles_systick_handler(void);

#endif /* HT_CYCLES_H */
