/*
 * ht_cycles.c - SysTick based tick counter. See ht_cycles.h.
 *
 * Wrap handling: the 24-bit SysTick counter reloads every 2^24 ticks (about
 * 0.67 s at 25 MHz, 671 million instructions under QEMU -icount shift=0,
 * less than one long verification run), so the SysTick interrupt counts the
 * periods in ht_cycles_state. The interrupt is pended when the counter
 * reaches 0, one tick before it reloads, so the value 0 counts as the first
 * tick of the next period: in period k (k interrupts counted) the time is
 * k * 2^24 + (2^24 - value) mod 2^24.
 *
 * A read takes the period count, the current value and the pending bit of
 * the SysTick exception, and retries if the interrupt ran in between. If the
 * counter reached 0 but the interrupt has not been taken yet (pending), the
 * value is read again - it now surely belongs to the new period - and that
 * period is counted here. A read is correct as long as the interrupt is not
 * held off for a whole period (0.67 s at 25 MHz).
 */
#include "ht_cycles.h"

/* SysTick and System Control Block registers (ARMv6-M / ARMv7-M). */
#define HT_SYST_CSR (*(volatile uint32_t *)0xE000E010u)
#define HT_SYST_RVR (*(volatile uint32_t *)0xE000E014u)
#define HT_SYST_CVR (*(volatile uint32_t *)0xE000E018u)
#define HT_SCB_ICSR (*(volatile uint32_t *)0xE000ED04u)

#define HT_SYST_CSR_ENABLE    0x1u
#define HT_SYST_CSR_TICKINT   0x2u
#define HT_SYST_CSR_CLKSOURCE 0x4u
#define HT_SCB_ICSR_PENDSTSET 0x04000000u
#define HT_SCB_ICSR_PENDSTCLR 0x02000000u

/* Largest reload value: the counter runs through 2^24 states per period. */
#define HT_SYST_RELOAD 0x00FFFFFFu
#define HT_SYST_PERIOD ((uint64_t)HT_SYST_RELOAD + 1u)

/* The only mutable state of the counter; written by the SysTick handler. */
static struct {
    volatile uint32_t reloads;
} ht_cycles_state;

void ht_cycles_start(void)
{
    HT_SYST_CSR = 0u;
    HT_SYST_RVR = HT_SYST_RELOAD;
    HT_SYST_CVR = 0u; /* any write clears the counter; it loads RVR next tick */
    HT_SYST_CSR = HT_SYST_CSR_CLKSOURCE | HT_SYST_CSR_TICKINT | HT_SYST_CSR_ENABLE;
    /*
     * Wait for that first load (at most one tick), so the count starts at the
     * top of a period, then forget whatever it may have signalled.
     */
    while (HT_SYST_CVR == 0u) {
    }
    HT_SCB_ICSR = HT_SCB_ICSR_PENDSTCLR;
    ht_cycles_state.reloads = 0u;
}

uint64_t ht_cycles_read(void)
{
    uint32_t before;
    uint32_t after;
    uint32_t value;
    uint32_t pending;

    do {
        before = ht_cycles_state.reloads;
        value = HT_SYST_CVR;
        pending = HT_SCB_ICSR & HT_SCB_ICSR_PENDSTSET;
        after = ht_cycles_state.reloads;
    } while (before != after);

    if (pending != 0u) {
        value = HT_SYST_CVR;
        ++before;
    }
    /* The counter counts down; 0 is the first tick of the next period. */
    return (uint64_t)before * HT_SYST_PERIOD
           + (value == 0u ? 0u : HT_SYST_PERIOD - (uint64_t)value);
}

void ht_cycles_systick_handler(void)
{
    ht_cycles_state.reloads = ht_cycles_state.reloads + 1u;
}
