/* wheelbench.h - the contract between Wheelbench and firmware run in the loop.
 *
 * Wheelbench compiles the firmware's C sources (strategy kind "firmware") with this header
 * force-included and on the include path, and calls, in one trial:
 *
 *   wb_init(&cfg)            once, before the first tick, with the device's fixed facts;
 *   wb_step(&in, &out)       once per control tick (the scenario's sensors.rate), in time order.
 *
 * Every trial loads a fresh copy of the compiled code: static variables start at their
 * initial values in each trial. `out` is zeroed before each call; what the firmware writes
 * is held until the next tick (zero-order hold).
 *
 * Conventions (SI, as in the scenario): angle 0 = upright, positive by the right-hand rule
 * about the pivot axis; wheel speed and wheel counts relative to the body; a positive volt
 * (or duty) accelerates the wheel positively and turns the body negatively.
 *
 * Inputs each tick. angle_rad, rate_rad_s and wheel_speed_rad_s are the readings the Python
 * strategies see (encoder quantisation, noise, bias and delay included). angle_counts and
 * wheel_counts are the same readings as cumulative raw encoder counts: angle counts from 0 at
 * upright, wheel counts from 0 at the first tick; they are whole-count equivalents of the
 * readings (exact when the sensor has no noise or bias), and 0 when the scenario gives that
 * sensor no counts_per_rev (then its *_counts_per_rev is 0 in wb_config_t). gyro_raw and
 * accel_raw are the IMU's latest sample (sensors.imu) as the chip's signed 16-bit words, in its
 * own axes (its orientation and axis mapping applied, its errors included): the reading divided by
 * one LSB (gyro_rad_s_per_lsb, accel_m_s2_per_lsb in wb_config_t: the scenario's resolution, else
 * its range / 32768, else +-2000 deg/s and +-16 g over 32768), rounded and clipped to
 * [-32768, 32767]; all 0, and both LSBs 0, without an IMU. t_us counts microseconds from the
 * trial's start and wraps at 2^32 like a hardware timer.
 *
 * Outputs. volts is the voltage wanted across the motor winding when pwm_max == 0; duty is a
 * signed duty in [-pwm_max, pwm_max] when pwm_max > 0, that is when the scenario sets
 * drive.pwm.resolution_bits (pwm_max = 2^bits - 1). A duty acts on the bus as it is at the
 * tick: its mean voltage is duty / pwm_max times the bus voltage (the supply, or a battery's sagged
 * bus), through the drive's PWM model when the scenario has one (dead band, dead time). A duty past
 * +-pwm_max acts as full scale (as volts past the supply act as the supply). A firmware that writes
 * only the form the drive does not read (volts of 1.5 duty counts or more and no duty when
 * pwm_max > 0, a duty and no volts when pwm_max == 0) ends the trial as strategy_failed at that tick;
 * `strategy.writes: duty` (or volts) in the scenario has the mismatch refused at load. The drive
 * clamps to +-supply. A non-finite volts ends the trial as strategy_failed. brake = 1
 * engages the wheel brake (the scenario needs drive.brake_torque). phase is the firmware's own
 * state number, shown as the trace's mode "fw <phase>".
 *
 * Failures. The firmware runs in a child process: a crash (segfault, abort, division by zero)
 * or a call that does not return within the trial's strategy budget ends the trial as
 * strategy_failed at that tick, and the run, sweep or check goes on. printf output goes to
 * firmware.log in the run folder of `wheelbench run` (other commands drop it).
 *
 * Several wheels. Each struct ends with per-wheel arrays of WB_MAX_WHEELS entries, appended
 * after the one-wheel fields (which keep their names and places, so one-wheel code compiles and
 * works unchanged). Entry i is wheel i + 1 in the scenario's order (`wheels:`; `wheel:` is wheel
 * 1), the wheel the one-wheel fields describe being entry 0; entries from n_wheels on are 0.
 *   - wb_config_t: n_wheels (1 to WB_MAX_WHEELS), wheels_counts_per_rev[i] (every wheel's
 *     encoder: sensors.wheel.counts_per_rev, so [0] == wheel_counts_per_rev), and mount;
 *   - wb_input_t: wheels_speed_rad_s[i] and wheels_counts[i] for every wheel, each as the
 *     one-wheel fields are for wheel 1 ([0] == wheel_speed_rad_s, [0] == wheel_counts);
 *   - wb_output_t: wheel i + 1 is driven by wheels_volts[i] (wheels_duty[i] with a PWM
 *     resolution: drive.pwm serves every wheel's bridge, one pwm_max for all, each duty a share of
 *     the bus all the wheels share) and braked when wheels_brake[i] is 1 (its wheel needs a brake_torque). For
 *     wheel 1 alone the one-wheel fields still count: it is driven by volts (duty) when the
 *     firmware left wheels_volts[0] (wheels_duty[0]) at 0, and braked when brake is 1. Firmware may
 *     thus write either form for wheel 1; one that writes both should write the same value.
 *
 * Attitude in 3D (a ball mount, or a hinge device with its wheels on any axes), appended last:
 *   - wb_config_t.mount: WB_MOUNT_HINGE or WB_MOUNT_BALL (body.mount);
 *   - wb_input_t.tilt_rad[2]: the measured tilt from upright about world x and about world y
 *     (right-hand rule; on a hinge, [0] is the body angle about the hinge and [1] is 0);
 *   - wb_input_t.rates_rad_s[3]: the measured body angular velocity about x, y, z of the heading
 *     frame (the world frame turned about the vertical by the heading: x and y are the tilts'
 *     rates at any heading, z the heading's rate); on a hinge, [0] is the rate about the hinge
 *     and [1], [2] are 0.
 * These are the readings the Python strategies see (Reading.angles_rad, Reading.rates_rad_s;
 * sensor noise, bias, delay and quantisation per axis). gyro_raw and accel_raw are filled on 3D
 * devices as on one wheel (the IMU of sensors.imu, in its own axes). The one-wheel fields mirror the first
 * entries: angle_rad == tilt_rad[0], rate_rad_s == rates_rad_s[0], and angle_counts counts
 * tilt_rad[0]. Attitude and rates are given on one-wheel hinge devices too.
 *
 * The supply, appended last: wb_input_t.bus_v is the drive's supply voltage at the tick, V, as a
 * controller measuring its bus would read it: through the power chain (battery or drive keys) the
 * bus as it stands (a pack sags under load and rises with regeneration), else the nominal
 * drive.supply. Firmware writing duties can scale them by supply_v / bus_v to give the volts it
 * means on a sagging pack (a duty is a share of the bus as it is).
 */
#ifndef WHEELBENCH_H
#define WHEELBENCH_H

#include <stdint.h>

/* WB_CDEF_BEGIN (Wheelbench reads the declarations from here to WB_CDEF_END) */
#define WB_MAX_WHEELS 3     /* length of the per-wheel arrays (entry 0: wheel 1) */
#define WB_MOUNT_HINGE 0    /* wb_config_t.mount: a hinge about the body's x axis */
#define WB_MOUNT_BALL 1     /* wb_config_t.mount: a ball joint (tips in any direction, turns about the vertical) */

typedef struct {            /* given once */
    uint32_t period_us;     /* control period */
    float supply_v;         /* drive supply (nominal) */
    int32_t angle_counts_per_rev, wheel_counts_per_rev;   /* 0 when that sensor is ideal */
    int32_t pwm_max;        /* full-scale duty when the drive has a PWM resolution, else 0 */
    /* several wheels: appended after the one-wheel fields */
    int32_t n_wheels;       /* wheels on the device, 1..WB_MAX_WHEELS */
    int32_t wheels_counts_per_rev[WB_MAX_WHEELS];     /* [0] == wheel_counts_per_rev */
    /* the IMU's raw words: appended after the wheels */
    float gyro_rad_s_per_lsb, accel_m_s2_per_lsb;     /* one LSB of gyro_raw / accel_raw; 0 without an IMU */
    /* 3D devices: appended after the IMU's LSBs */
    int32_t mount;          /* WB_MOUNT_HINGE or WB_MOUNT_BALL */
} wb_config_t;

typedef struct {            /* given every tick: what the firmware would read */
    uint32_t t_us;
    float angle_rad, rate_rad_s, wheel_speed_rad_s;   /* the same readings the Python strategies see */
    int32_t angle_counts, wheel_counts;               /* raw encoder counts (cumulative) */
    int16_t gyro_raw[3], accel_raw[3];                /* raw IMU readings when an IMU is set, else 0 */
    /* several wheels: appended after the one-wheel fields */
    float wheels_speed_rad_s[WB_MAX_WHEELS];          /* [0] == wheel_speed_rad_s */
    int32_t wheels_counts[WB_MAX_WHEELS];             /* [0] == wheel_counts */
    /* 3D devices: appended after the per-wheel fields */
    float tilt_rad[2];      /* tilt from upright about world x, y; [0] == angle_rad (a hinge: [1] == 0) */
    float rates_rad_s[3];   /* body rate about heading-frame x, y, z; [0] == rate_rad_s (a hinge: [1], [2] == 0) */
    /* the supply: appended after the 3D fields */
    float bus_v;            /* the drive's supply at the tick, as an ADC on the bus reads it (see above) */
} wb_input_t;

typedef struct {            /* filled by the firmware every tick */
    float volts;            /* used when pwm_max == 0 */
    int32_t duty;           /* signed duty, used when pwm_max > 0 */
    uint8_t brake;          /* 1 engages the wheel brake */
    uint8_t phase;          /* free for the firmware's own state; shown as the trace's mode */
    /* several wheels: appended after the one-wheel fields; for wheel 1 a non-zero entry wins */
    float wheels_volts[WB_MAX_WHEELS];                /* used when pwm_max == 0 */
    int32_t wheels_duty[WB_MAX_WHEELS];               /* used when pwm_max > 0 */
    uint8_t wheels_brake[WB_MAX_WHEELS];              /* 1 engages that wheel's brake */
} wb_output_t;

void wb_init(const wb_config_t *cfg);
void wb_step(const wb_input_t *in, wb_output_t *out);
/* WB_CDEF_END */

#endif /* WHEELBENCH_H */
