-- +goose Up
-- A service event may start a new baseline period for one whole component
-- (a jaw in every beam and setup, an MLC bank, a beam's penumbra, a jaw's
-- light field) instead of a list of edges.
ALTER TABLE service_events ADD COLUMN component_kind text
    CHECK (component_kind IN ('jaw','mlc_bank','mlc_leaf','penumbra','light_field'));
ALTER TABLE service_events ADD COLUMN component text;

-- The limits a finding's level was judged against: its component's own
-- (a bank's bank-mean limits, a jaw's strictest edge limits), not those of
-- one evidence series.
ALTER TABLE findings ADD COLUMN tolerance_mm double precision, ADD COLUMN action_mm double precision;

-- +goose Down
ALTER TABLE findings DROP COLUMN tolerance_mm, DROP COLUMN action_mm;
ALTER TABLE service_events DROP COLUMN component, DROP COLUMN component_kind;
