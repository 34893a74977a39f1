/* cube_lqr.c - example firmware of our own: the corner cube's three-wheel LQR balance law in single
 * precision, as it would run on a microcontroller with a floating-point unit.
 *
 * Where the numbers come from: cube_gains.h is the unedited output of
 * `wheelbench gains scenarios/cube_corner.yaml --format c` (only its first comment line names the
 * source differently). Its reference function wb_balance_volts holds the law with the sensor-delay
 * predictor folded in (gains on the reading and on the commands held since it was taken); this file
 * builds the state vector from wheelbench.h's 3D inputs and writes one voltage per wheel.
 *
 * State x (cube_gains.h's order): tilt about world x and y [rad], body rate about x, y, z [rad/s],
 * wheel 1..3 speed relative to the body [rad/s]; the inputs tilt_rad[2], rates_rad_s[3] and
 * wheels_speed_rad_s[3] are exactly these readings.
 *
 * Defines: FLIP_WHEEL (default 0; 1..3 turns that wheel's command around, as a motor wired the
 * wrong way round would, for tests that need a wrong sign).
 */
#include <stdio.h>
#include "wheelbench.h"
#define WB_REAL float            /* the reference function in single precision */
#include "cube_gains.h"

#ifndef FLIP_WHEEL
#define FLIP_WHEEL 0
#endif
#if WB_N_STATES != 8 || WB_N_WHEELS != 3
#error "cube_lqr.c expects a ball mount with three wheels, one acting about the vertical (8 states)"
#endif

#define PHASE_BALANCE 1
#define PHASE_LIMIT 2                /* a command was clamped to the supply this tick */
#define PHASE_WRONG_DEVICE 9         /* not the device the gains were made for: the wheels are left at 0 V */

static wb_balance_state_t law;
static int device_fits;

void wb_init(const wb_config_t *cfg) {
    /* the gains hold for one device at one loop rate: a ball mount, this many wheels, this period */
    device_fits = cfg->mount == WB_MOUNT_BALL && cfg->n_wheels == WB_N_WHEELS
                  && cfg->period_us == (uint32_t)(WB_PERIOD_S * 1e6f + 0.5f);
    wb_balance_reset(&law);
    printf("cube_lqr: %s mount, %ld wheels, %lu us period%s\n", cfg->mount == WB_MOUNT_BALL ? "ball" : "hinge",
           (long)cfg->n_wheels, (unsigned long)cfg->period_us, device_fits ? "" : ": not the device of cube_gains.h");
}

void wb_step(const wb_input_t *in, wb_output_t *out) {
    float x[WB_N_STATES], volts[WB_N_WHEELS];
    int j, limited = 0;
    if (!device_fits) {
        out->phase = PHASE_WRONG_DEVICE;
        return;
    }
    x[WB_X_TILT_X] = in->tilt_rad[0];
    x[WB_X_TILT_Y] = in->tilt_rad[1];
    x[WB_X_RATE_X] = in->rates_rad_s[0];
    x[WB_X_RATE_Y] = in->rates_rad_s[1];
    x[WB_X_RATE_Z] = in->rates_rad_s[2];
    x[WB_X_WHEEL1_SPEED] = in->wheels_speed_rad_s[0];
    x[WB_X_WHEEL2_SPEED] = in->wheels_speed_rad_s[1];
    x[WB_X_WHEEL3_SPEED] = in->wheels_speed_rad_s[2];
    wb_balance_volts(&law, x, volts);
    for (j = 0; j < WB_N_WHEELS; j++) {
        limited |= volts[j] >= WB_SUPPLY_V[j] || volts[j] <= -WB_SUPPLY_V[j];
        out->wheels_volts[j] = (j + 1 == FLIP_WHEEL) ? -volts[j] : volts[j];
    }
    out->phase = limited ? PHASE_LIMIT : PHASE_BALANCE;
}
