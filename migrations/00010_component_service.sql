-- +goose Up
-- A service event may start a new baseline period for one whole component
-- (a jaw in every beam and setup, an MLC bank, a beam's penumbra, a jaw's
-- light field) instead of a list of edges.
ALTER TABLE service_events ADD COLUMN component_kind text
    CHECK (component_kind IN ('jaw','mlc_bank','mlc_leaf','penumbra','light_field'));
ALTER TABLE service_events ADD COLUMN component text;

-- +goose Down
ALTER TABLE service_events DROP COLUMN component, DROP COLUMN component_kind;
