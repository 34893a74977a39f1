/* balance_q16.c - example firmware of our own: the desk pendulum's LQR balance law in Q16.16
 * fixed point, with the sensor-delay predictor, reading raw encoder counts, writing volts (or a
 * signed PWM duty when the drive has a PWM resolution).
 *
 * Where the numbers come from: desk_gains.h is the unedited output of
 * `wheelbench gains --format c` for the bundled desk pendulum (only its first comment line names
 * the source differently). wb_init folds the gains and the predictor into one row of Q16 gains
 * once, in floating point, as a team would do offline; wb_step then uses integers only:
 *     x_now = Ad^n (Phi_f x_meas + Gam_f u[k-n-1]) + sum_i Ad^(n-1-i) Bd u[k-n+i]
 *     v     = -K x_now = -(gx . x_meas + sum_j gu[j] u_held[j])
 * Scales: angle 2 pi / angle_counts_per_rev rad per count (kept in Q24 so that the per-count
 * step is exact to 6e-8 relative); wheel speed = counts moved in one period times
 * 2 pi / (wheel_counts_per_rev * period) rad/s per count (Q16); body rate from the gyro reading
 * (no IMU model yet, so the float reading, converted to Q16 once).
 * Products are taken in 64 bits; every Q16 rounding is at most 2^-17 of the unit.
 *
 * Defines: BAL_SIGN (default 1; -1 flips the law, for tests that need a wrong sign).
 */
#include <stdio.h>
#include <stdint.h>
#include "wheelbench.h"
#include "desk_gains.h"

#ifndef BAL_SIGN
#define BAL_SIGN 1
#endif

#define Q 16
#define ONE_Q16 65536.0
#define MAX_PERIODS 8                   /* longest delay predictor this firmware keeps, periods */
#define PHASE_BALANCE 1
#define PHASE_LIMIT 2                   /* the command was clamped to the supply this tick */

static int32_t gx[3];                   /* gains on angle, rate, wheel speed, Q16 V/rad, V s/rad */
static int32_t gu[MAX_PERIODS + 1];     /* gains on the held commands, oldest first, Q16 V/V */
static int32_t u_held[MAX_PERIODS + 1]; /* commands applied at the last n+1 ticks, Q16 V, oldest first */
static int n_held;                      /* n + 1 */
static int32_t angle_rad_per_count_q24; /* Q24 rad per angle count */
static int32_t wheel_rad_s_per_count_q16; /* Q16 rad/s per wheel count moved in one period */
static int32_t prev_wheel_counts;
static int32_t supply_q16, pwm_max;

static int32_t to_q(double x, int bits) { double s = x * (double)(1L << bits); return (int32_t)(s >= 0 ? s + 0.5 : s - 0.5); }

static void mat_mul(const double *a, const double *b, double *out) {   /* 3x3, row-major */
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++) {
            double s = 0;
            for (int k = 0; k < 3; k++) s += a[3 * i + k] * b[3 * k + j];
            out[3 * i + j] = s;
        }
}

static double k_times(const double *m, int col) {   /* (K m)[col] for a 3x3 m, or K v for a column v (stride 1) */
    double s = 0;
    for (int i = 0; i < 3; i++) s += (double)WB_K_DISCRETE[i] * m[3 * i + col];
    return s;
}

void wb_init(const wb_config_t *cfg) {
    const int n = WB_DELAY_WHOLE_PERIODS < MAX_PERIODS ? WB_DELAY_WHOLE_PERIODS : MAX_PERIODS;
    double pw[MAX_PERIODS + 1][9], tmp[9], ad[9], phi[9], col[9] = {0};
    for (int i = 0; i < 9; i++) { ad[i] = WB_AD[i]; phi[i] = WB_PHI_F[i]; pw[0][i] = (i % 4 == 0); }
    for (int p = 1; p <= n; p++) mat_mul(ad, pw[p - 1], pw[p]);
    mat_mul(pw[n], phi, tmp);
    for (int j = 0; j < 3; j++) gx[j] = to_q(k_times(tmp, j), Q);
    for (int i = 0; i < 3; i++) col[3 * i] = WB_GAM_F[i];             /* Gam_f as a first column */
    mat_mul(pw[n], col, tmp);
    gu[0] = to_q(k_times(tmp, 0), Q);
    for (int i = 0; i < n; i++) {
        for (int r = 0; r < 3; r++) col[3 * r] = WB_BD[r];
        mat_mul(pw[n - 1 - i], col, tmp);
        gu[i + 1] = to_q(k_times(tmp, 0), Q);
    }
    n_held = n + 1;
    for (int i = 0; i < n_held; i++) u_held[i] = 0;
    angle_rad_per_count_q24 = cfg->angle_counts_per_rev ? to_q(6.283185307179586 / cfg->angle_counts_per_rev, 24) : 0;
    wheel_rad_s_per_count_q16 = cfg->wheel_counts_per_rev
        ? to_q(6.283185307179586 / cfg->wheel_counts_per_rev / (cfg->period_us * 1e-6), Q) : 0;
    supply_q16 = to_q(cfg->supply_v, Q);
    pwm_max = cfg->pwm_max;
    prev_wheel_counts = 0;
    printf("balance_q16: gx = %ld %ld %ld, gu[%d] = %ld (Q16), angle step %ld (Q24), wheel step %ld (Q16)\n",
           (long)gx[0], (long)gx[1], (long)gx[2], n, (long)gu[n], (long)angle_rad_per_count_q24,
           (long)wheel_rad_s_per_count_q16);
}

void wb_step(const wb_input_t *in, wb_output_t *out) {
    int32_t angle_q16 = (int32_t)(((int64_t)in->angle_counts * angle_rad_per_count_q24) >> 8);
    int32_t rate_q16 = (int32_t)(in->rate_rad_s * (float)ONE_Q16);
    int32_t wheel_q16 = (in->wheel_counts - prev_wheel_counts) * wheel_rad_s_per_count_q16;
    prev_wheel_counts = in->wheel_counts;
    int64_t acc = (int64_t)gx[0] * angle_q16 + (int64_t)gx[1] * rate_q16 + (int64_t)gx[2] * wheel_q16;
    for (int i = 0; i < n_held; i++) acc += (int64_t)gu[i] * u_held[i];
    int32_t v = (int32_t)(-BAL_SIGN * (acc >> Q));
    out->phase = PHASE_BALANCE;
    if (v > supply_q16) { v = supply_q16; out->phase = PHASE_LIMIT; }
    if (v < -supply_q16) { v = -supply_q16; out->phase = PHASE_LIMIT; }
    for (int i = 0; i + 1 < n_held; i++) u_held[i] = u_held[i + 1];   /* what the drive applies, for the predictor */
    u_held[n_held - 1] = v;
    if (pwm_max > 0) out->duty = (int32_t)(((int64_t)v * pwm_max) / supply_q16);
    else out->volts = (float)v / (float)ONE_Q16;
}
