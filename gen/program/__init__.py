"""The integer program: lowering, ranges, the fixed-point plan and the golden interpreter."""
