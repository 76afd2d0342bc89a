-- +goose Up
-- Collimator geometry of each machine, for the penumbra model: which jaw
-- pair is nearer the source and the source-to-collimator distances (cm) of
-- the upper jaws, the lower jaws and the MLC. NULL until recorded.
ALTER TABLE machines
    ADD COLUMN upper_jaws   text CHECK (upper_jaws IN ('X','Y')),
    ADD COLUMN upper_scd_cm double precision CHECK (upper_scd_cm > 0),
    ADD COLUMN lower_scd_cm double precision CHECK (lower_scd_cm > 0),
    ADD COLUMN mlc_scd_cm   double precision CHECK (mlc_scd_cm >= 0),
    ADD CONSTRAINT machines_collimators_whole CHECK (
        (upper_jaws IS NULL) = (upper_scd_cm IS NULL) AND (upper_jaws IS NULL) = (lower_scd_cm IS NULL)
        AND (upper_jaws IS NULL) = (mlc_scd_cm IS NULL)),
    ADD CONSTRAINT machines_collimators_order CHECK (upper_scd_cm < lower_scd_cm AND lower_scd_cm < sad_cm AND mlc_scd_cm < sad_cm);

-- +goose Down
ALTER TABLE machines DROP CONSTRAINT machines_collimators_order, DROP CONSTRAINT machines_collimators_whole,
    DROP COLUMN mlc_scd_cm, DROP COLUMN lower_scd_cm, DROP COLUMN upper_scd_cm, DROP COLUMN upper_jaws;
