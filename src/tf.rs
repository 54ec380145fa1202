//! Multi-resolution excess power: the Q-transform tiling.
