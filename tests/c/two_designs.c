/*
 * two_designs.c - one program running the pipelines of two specs side by side, built with
 * HT_NAME_PREFIX=hive_ and coupon_ (ht_channel.c). Reads lines "<h|c> <code> <temp_centi>"
 * and prints, for every output, "<h|c> <value> <status>" (status in hex).
 */
#include <stdint.h>
#include <stdio.h>

void hive_channel_start(void);
uint32_t hive_channel_step(int32_t code, int32_t temp_centi, int32_t *out);
void coupon_channel_start(void);
uint32_t coupon_channel_step(int32_t code, int32_t temp_centi, int32_t *out);

int main(void)
{
    char which;
    long code;
    long temp;

    hive_channel_start();
    coupon_channel_start();
    while (scanf(" %c %ld %ld", &which, &code, &temp) == 3) {
        int32_t out = 0;
        uint32_t status = which == 'h'
                              ? hive_channel_step((int32_t)code, (int32_t)temp, &out)
                              : coupon_channel_step((int32_t)code, (int32_t)temp, &out);
        if (status != 0u) {
            printf("%c %ld %lx\n", which, (long)out, (unsigned long)status);
        }
    }
    return 0;
}
