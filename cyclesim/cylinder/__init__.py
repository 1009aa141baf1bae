"""The cylinder: slider-crank geometry, wall areas, the orifice-flow relations of the valves, and the distinct settings of a batch's cases."""
