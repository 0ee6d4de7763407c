/* The benchmark's hand-written Van der Pol RK4 steps (integer Q8.24 and its float twin). */
#ifndef VDP_REFERENCE_H
#define VDP_REFERENCE_H

#include <stdint.h>

void vdp_reference_step(int32_t state[2]);
void vdp_float_step(float state[2]);

#endif
