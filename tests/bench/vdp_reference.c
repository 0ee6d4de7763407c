/* Hand-written reference step: Van der Pol (mu = 1) by classical RK4, in plain 32-bit integer C,
 * as an engineer writes it by hand for a small controller. For the board benchmark only: the
 * generated step's cost is set beside this one.
 *
 *   x' = y,  y' = (1 - x^2) y - x,  step h = 0.0099949302885 (the built-in model at 1 kHz)
 *
 * States and slopes are Q8.24 in int32_t; step constants are folded to Q0.32 (h/2, h, h/6 times
 * 2^32). Stage points truncate (arithmetic shift: gcc and clang shift right arithmetically); each
 * state update is rounded once, after summing k1 + 2 k2 + 2 k3 + k4 exactly in 64 bits.
 */
#include <stdint.h>

#include "vdp_reference.h"

#define FRACTION 24
#define ONE ((int32_t)1 << FRACTION)

static const int64_t H_HALF = 21463949;  /* h/2 * 2^32 */
static const int64_t H_FULL = 42927899;  /* h * 2^32 */
static const int64_t H_SIXTH = 7154650;  /* h/6 * 2^32 */

static inline int32_t mul_q24(int32_t a, int32_t b)
{
    return (int32_t)(((int64_t)a * b) >> FRACTION);
}

/* a + h' * slope, with h' in Q0.32: one product, truncated */
static inline int32_t advance(int32_t a, int64_t h, int32_t slope)
{
    return a + (int32_t)((h * slope) >> 32);
}

static inline int32_t slope_y(int32_t x, int32_t y)
{
    return mul_q24(y, ONE - mul_q24(x, x)) - x;
}

void vdp_reference_step(int32_t state[2])
{
    const int32_t x = state[0];
    const int32_t y = state[1];
    const int32_t kx1 = y;
    const int32_t ky1 = slope_y(x, y);
    const int32_t x2 = advance(x, H_HALF, kx1);
    const int32_t y2 = advance(y, H_HALF, ky1);
    const int32_t kx2 = y2;
    const int32_t ky2 = slope_y(x2, y2);
    const int32_t x3 = advance(x, H_HALF, kx2);
    const int32_t y3 = advance(y, H_HALF, ky2);
    const int32_t kx3 = y3;
    const int32_t ky3 = slope_y(x3, y3);
    const int32_t x4 = advance(x, H_FULL, kx3);
    const int32_t y4 = advance(y, H_FULL, ky3);
    const int32_t kx4 = y4;
    const int32_t ky4 = slope_y(x4, y4);
    const int64_t sum_x = (int64_t)kx1 + 2 * (int64_t)kx2 + 2 * (int64_t)kx3 + kx4;
    const int64_t sum_y = (int64_t)ky1 + 2 * (int64_t)ky2 + 2 * (int64_t)ky3 + ky4;
    const int64_t half = (int64_t)1 << 31;
    state[0] = x + (int32_t)((sum_x * H_SIXTH + half) >> 32);
    state[1] = y + (int32_t)((sum_y * H_SIXTH + half) >> 32);
}
