-- The equivalent SNR of a trigger's clustered tiles (src/clusters.rs):
-- sqrt(2 x the summed excess energy of the connected tiles of its best
-- plane); NULL for triggers stored before (read as the single-tile snr).
ALTER TABLE triggers ADD COLUMN snr_eq REAL;
ALTER TABLE superseded_triggers ADD COLUMN snr_eq REAL;
