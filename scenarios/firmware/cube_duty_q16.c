/* cube_duty_q16.c - example firmware of our own: the corner cube's three-wheel LQR balance law in
 * Q16.16 fixed point, as it would run on a microcontroller without a floating-point unit, writing a
 * signed PWM duty per wheel (10-bit timers: +-1023 counts).
 *
 * Where the numbers come from: cube_pack_gains.h is the unedited output of
 * `wheelbench gains scenarios/firmware/cube_pack_firmware.yaml --set "strategy={kind: lqr}" --format c`.
 * wb_init turns its gains (on the reading, and on the commands held for the delay predictor) into Q16
 * integers once, as a team would offline; wb_step converts the float readings to Q16 (rounded to the
 * nearest 2^-16) and then uses integers only:
 *     v_j  = -(sum_i G[j][i] x_i + sum_k sum_i H[k][j][i] u_k,i)      volts, Q16, 64-bit sums
 *     u_j  = v_j clamped to +-supply                                  held for the predictor
 *     duty = v_j * PWM_MAX / supply, in sixteenths of a count (DUTY_T), rounded to the nearest
 *            sixteenth, clamped to +-PWM_MAX, then rounded to the nearest whole count
 * A duty is a share of the bus as it stands (wheelbench.h): the firmware scales by the pack's nominal
 * voltage (supply_v), so a sagging pack gives less voltage than the law asked for.
 *
 * Inputs: the tilts and body rates as given (float readings, converted to Q16 once; a ball mount has
 * no raw attitude counts), each wheel's speed from its encoder counts moved in one period
 * (2 pi / (counts_per_rev * period) rad/s per count, Q16).
 *
 * Defines (for tests that need a broken firmware; the defaults are the working law):
 *   PWM_BITS     timer resolution (default 10): the firmware refuses a drive with another pwm_max;
 *   DUTY_T       type of the duty in sixteenths of a count (default int32_t; int16_t overflows past
 *                2047 counts, twice full scale, on a hard push: the clamp comes too late);
 *   SWAP_WHEELS  1 writes wheel 1's duty to wheel 2 and wheel 2's to wheel 1 (a swapped connector);
 *   FLIP_WHEEL   1..3 turns that wheel's duty around (a motor wired the wrong way round).
 */
#include <stdio.h>
#include <stdint.h>
#include "wheelbench.h"
#include "cube_pack_gains.h"

#ifndef PWM_BITS
#define PWM_BITS 10
#endif
#ifndef DUTY_T
#define DUTY_T int32_t
#endif
#ifndef SWAP_WHEELS
#define SWAP_WHEELS 0
#endif
#ifndef FLIP_WHEEL
#define FLIP_WHEEL 0
#endif
#if WB_N_STATES != 8 || WB_N_WHEELS != 3
#error "cube_duty_q16.c expects a ball mount with three wheels, one acting about the vertical (8 states)"
#endif

#define Q 16
#define PWM_MAX ((1L << PWM_BITS) - 1)
#define PHASE_BALANCE 1
#define PHASE_LIMIT 2                /* a duty was clamped to full scale this tick */
#define PHASE_WRONG_DEVICE 9         /* not the device the gains were made for: the duties are left at 0 */

static int32_t g_read[WB_N_WHEELS][WB_N_STATES];                 /* Q16 gains on the reading */
static int32_t g_held[WB_HELD_COMMANDS][WB_N_WHEELS][WB_N_WHEELS]; /* Q16 gains on the held commands */
static int32_t u_held[WB_HELD_COMMANDS][WB_N_WHEELS];            /* Q16 volts, oldest tick first */
static int32_t supply_q16[WB_N_WHEELS];
static int32_t wheel_step_q16;                                   /* Q16 rad/s per count moved in a period */
static int32_t prev_counts[WB_N_WHEELS];
static int device_fits;

static int32_t to_q16(double x) { double s = x * 65536.0; return (int32_t)(s >= 0 ? s + 0.5 : s - 0.5); }

/* n / d rounded to the nearest integer, halves away from zero (d > 0) */
static int64_t div_round(int64_t n, int64_t d) { return n >= 0 ? (n + d / 2) / d : -((-n + d / 2) / d); }

void wb_init(const wb_config_t *cfg) {
    int i, j, k;
    /* the gains hold for one device at one loop rate, and the duties for one timer resolution */
    device_fits = cfg->mount == WB_MOUNT_BALL && cfg->n_wheels == WB_N_WHEELS
                  && cfg->period_us == (uint32_t)(WB_PERIOD_S * 1e6f + 0.5f) && cfg->pwm_max == PWM_MAX
                  && cfg->wheel_counts_per_rev > 0;
    for (j = 0; j < WB_N_WHEELS; j++) {
        for (i = 0; i < WB_N_STATES; i++) g_read[j][i] = to_q16(WB_GAIN_ON_READING[j][i]);
        for (k = 0; k < WB_HELD_COMMANDS; k++)
            for (i = 0; i < WB_N_WHEELS; i++) g_held[k][j][i] = to_q16(WB_GAIN_ON_HELD[k][j][i]);
        supply_q16[j] = to_q16(WB_SUPPLY_V[j]);
        prev_counts[j] = 0;
    }
    for (k = 0; k < WB_HELD_COMMANDS; k++)
        for (j = 0; j < WB_N_WHEELS; j++) u_held[k][j] = 0;
    wheel_step_q16 = cfg->wheel_counts_per_rev > 0
        ? to_q16(6.283185307179586 / cfg->wheel_counts_per_rev / (cfg->period_us * 1e-6)) : 0;
    printf("cube_duty_q16: %s mount, %ld wheels, %lu us period, pwm_max %ld (expects %ld), wheel step %ld (Q16)%s\n",
           cfg->mount == WB_MOUNT_BALL ? "ball" : "hinge", (long)cfg->n_wheels, (unsigned long)cfg->period_us,
           (long)cfg->pwm_max, (long)PWM_MAX, (long)wheel_step_q16,
           device_fits ? "" : ": not the device of cube_pack_gains.h and this timer");
}

void wb_step(const wb_input_t *in, wb_output_t *out) {
    int32_t x[WB_N_STATES], duty[WB_N_WHEELS], u[WB_N_WHEELS];
    int i, j, k, limited = 0;
    if (!device_fits) {
        out->phase = PHASE_WRONG_DEVICE;
        return;
    }
    x[WB_X_TILT_X] = to_q16(in->tilt_rad[0]);
    x[WB_X_TILT_Y] = to_q16(in->tilt_rad[1]);
    x[WB_X_RATE_X] = to_q16(in->rates_rad_s[0]);
    x[WB_X_RATE_Y] = to_q16(in->rates_rad_s[1]);
    x[WB_X_RATE_Z] = to_q16(in->rates_rad_s[2]);
    for (j = 0; j < WB_N_WHEELS; j++) {
        x[WB_X_WHEEL1_SPEED + j] = (in->wheels_counts[j] - prev_counts[j]) * wheel_step_q16;
        prev_counts[j] = in->wheels_counts[j];
    }
    for (j = 0; j < WB_N_WHEELS; j++) {
        int64_t acc = 0;                                     /* Q32 volts */
        int32_t v;
        DUTY_T d16;                                          /* the duty in sixteenths of a count */
        for (i = 0; i < WB_N_STATES; i++) acc += (int64_t)g_read[j][i] * x[i];
        for (k = 0; k < WB_HELD_COMMANDS; k++)
            for (i = 0; i < WB_N_WHEELS; i++) acc += (int64_t)g_held[k][j][i] * u_held[k][i];
        v = (int32_t)-div_round(acc, 1L << Q);               /* Q16 volts, unclamped */
        u[j] = v > supply_q16[j] ? supply_q16[j] : (v < -supply_q16[j] ? -supply_q16[j] : v);
        d16 = (DUTY_T)div_round((int64_t)v * PWM_MAX * 16, supply_q16[j]);
        if (d16 > 16 * PWM_MAX) { d16 = 16 * PWM_MAX; limited = 1; }
        if (d16 < -16 * PWM_MAX) { d16 = -16 * PWM_MAX; limited = 1; }
        duty[j] = (int32_t)div_round(d16, 16);
    }
    for (k = 0; k + 1 < WB_HELD_COMMANDS; k++)              /* what the law asked of the drive, for the predictor */
        for (j = 0; j < WB_N_WHEELS; j++) u_held[k][j] = u_held[k + 1][j];
    for (j = 0; j < WB_N_WHEELS; j++) u_held[WB_HELD_COMMANDS - 1][j] = u[j];
    for (j = 0; j < WB_N_WHEELS; j++) {
        int to = j;
        if (SWAP_WHEELS && j < 2) to = 1 - j;
        out->wheels_duty[to] = (to + 1 == FLIP_WHEEL) ? -duty[j] : duty[j];
    }
    out->phase = limited ? PHASE_LIMIT : PHASE_BALANCE;
}
