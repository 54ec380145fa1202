mod rates_blocks;
mod rates_limits;
