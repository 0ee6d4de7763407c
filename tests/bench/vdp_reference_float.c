/* The reference step's single-precision float twin: the same RK4 in float, for the board
 * benchmark (software float on Cortex-M0/M3 and AVR, the FPU on Cortex-M4F). Built with
 * -ffp-contract=off, so each operation rounds once, as on the host. */
#include "vdp_reference.h"

static const float H_HALF = 0.00499746514425f;
static const float H_FULL = 0.0099949302885f;
static const float H_SIXTH = 0.00166582171475f;

static inline float slope_y(float x, float y)
{
    return (1.0f - x * x) * y - x;
}

void vdp_float_step(float state[2])
{
    const float x = state[0];
    const float y = state[1];
    const float kx1 = y;
    const float ky1 = slope_y(x, y);
    const float x2 = x + H_HALF * kx1;
    const float y2 = y + H_HALF * ky1;
    const float kx2 = y2;
    const float ky2 = slope_y(x2, y2);
    const float x3 = x + H_HALF * kx2;
    const float y3 = y + H_HALF * ky2;
    const float kx3 = y3;
    const float ky3 = slope_y(x3, y3);
    const float x4 = x + H_FULL * kx3;
    const float y4 = y + H_FULL * ky3;
    const float kx4 = y4;
    const float ky4 = slope_y(x4, y4);
    state[0] = x + H_SIXTH * (kx1 + 2.0f * kx2 + 2.0f * kx3 + kx4);
    state[1] = y + H_SIXTH * (ky1 + 2.0f * ky2 + 2.0f * ky3 + ky4);
}
