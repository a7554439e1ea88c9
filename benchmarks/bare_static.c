/*
 * bare_static.c - the static pass as one fused C loop, for benchmarks/speed.py.
 *
 * For each code of a run at one temperature: the firmware's own integer static path
 * (ht_settled_output, compiled -O2 with the design's headers), the float64 reference in
 * the order hosttool computes it (scale, Horner, temperature, clip) and the statistics
 * (largest and summed |error|, monotonicity breaks). What hosttool's compiled sweep does
 * per code, written as plainly as C allows: the yardstick of its speed.
 */
#include <math.h>
#include <stdint.h>

#include "ht_pipeline.h"

void bench_static(int32_t first, uint32_t count, int32_t temp, const double *fp,
                  const double *flin, int32_t nlin, const int32_t *ip, double *result);

/* fp: 2^G, offset, scale, 2^K, alpha, gamma. ip: has_lin, has_tc, tref, tmin, tmax, sign.
 * result: largest |error|, sum of |error|, monotonicity breaks. */
void bench_static(int32_t first, uint32_t count, int32_t temp, const double *fp,
                  const double *flin, int32_t nlin, const int32_t *ip, double *result)
{
    ht_pipeline_t p;
    double max_err = 0.0, sum = 0.0, breaks = 0.0;
    int32_t previous = 0;
    int32_t t = temp < ip[3] ? ip[3] : (temp > ip[4] ? ip[4] : temp);
    double dt = (double)(t - ip[2]);
    uint32_t i;

    ht_pipeline_init(&p);
    for (i = 0u; i < count; ++i) {
        int32_t x = (int32_t)((int64_t)first + (int64_t)i);
        int32_t out = ht_settled_output(&p, x, temp);
        double s = ((double)x * fp[0] - fp[1]) * fp[2];
        double err, a;

        if (ip[0]) {
            double w = s / fp[3];
            double c0 = flin[nlin - 1] + w * 0.0;
            int32_t k;

            for (k = nlin - 2; k >= 0; --k) {
                c0 = flin[k] + c0 * w;
            }
            s = c0 * fp[3];
        }
        if (ip[1]) {
            s = (s - fp[4] * dt) * (1.0 + fp[5] * dt);
        }
        if (s > 2147483647.0) {
            s = 2147483647.0;
        } else if (s < -2147483648.0) {
            s = -2147483648.0;
        }
        err = (double)out - s;
        a = fabs(err);
        if (a > max_err) {
            max_err = a;
        }
        sum += a;
        if (i > 0u && ((int64_t)out - previous) * ip[5] < 0) {
            breaks += 1.0;
        }
        previous = out;
    }
    result[0] = max_err;
    result[1] = sum;
    result[2] = breaks;
}
