-- Version 6: each stored point's sweep direction and VGS spread (the difference of its last two VGS readings), so a
-- refit chooses and weights the points exactly as the import and `benchlab fit` did (NULL: not recorded).
ALTER TABLE sweep_points ADD COLUMN direction TEXT;
ALTER TABLE sweep_points ADD COLUMN spread_v REAL;
