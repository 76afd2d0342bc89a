-- +goose Up
-- Alerts of the combined checks: a jaw pair's field size or centre (pair)
-- and an MLC bank's mean offset (bank).
ALTER TABLE alerts DROP CONSTRAINT alerts_family_check;
ALTER TABLE alerts ADD CONSTRAINT alerts_family_check
    CHECK (family IN ('limit','shewhart','ewma','cusum','nelson','trend','overdue','pair','bank'));

-- +goose Down
ALTER TABLE alerts DROP CONSTRAINT alerts_family_check;
ALTER TABLE alerts ADD CONSTRAINT alerts_family_check
    CHECK (family IN ('limit','shewhart','ewma','cusum','nelson','trend','overdue'));
