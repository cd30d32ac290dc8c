/* Test driver: feeds the generated controller ADC records read from stdin (three
   little-endian uint16 per period: vac, il, vbus) and checks each output against the
   contract; built with the address and undefined-behaviour sanitizers by
   tests/test_sanitizers.py. Exit 0: every output legal; 3: an output outside the contract. */
#include <stdio.h>
#include "DRIVER_PREFIX_ctrl.h"

int main(void)
{
    DRIVER_PREFIX_ctrl_t c;
    DRIVER_PREFIX_adc_t adc;
    DRIVER_PREFIX_pwm_t pwm;
    unsigned char b[6];
    unsigned long k = 0ul;

    DRIVER_PREFIX_init(&c);
    while (fread(b, 1u, sizeof b, stdin) == sizeof b) {
        adc.vac = (uint16_t)(b[0] | (b[1] << 8));
        adc.il = (uint16_t)(b[2] | (b[3] << 8));
        adc.vbus = (uint16_t)(b[4] | (b[5] << 8));
        DRIVER_PREFIX_step(&c, &adc, &pwm);
        if (pwm.compare > DRIVER_PREFIX_UPPER_PWM_PERIOD_COUNTS || pwm.mode > DRIVER_PREFIX_UPPER_MODE_SENSOR_FAULT ||
            ((pwm.gates & DRIVER_PREFIX_UPPER_GATE_SLOW_LO) && (pwm.gates & DRIVER_PREFIX_UPPER_GATE_SLOW_HI))) {
            fprintf(stderr, "period %lu: compare %u gates %u mode %u\n", k, pwm.compare, pwm.gates, pwm.mode);
            return 3;
        }
        if ((k % 997ul) == 0ul) {
            DRIVER_PREFIX_clear_faults(&c); /* a fault-clear request now and then */
        }
        k++;
    }
    return 0;
}
