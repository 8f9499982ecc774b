-- plyledger schema, migration 3: an inspection says whether its data were
-- simulated, and why its flight hours or cycles go against the airframe's
-- other inspections when they do.
--
-- simulated: 1 when the inspection's data come from a simulation (the
-- sample fleet, tests, studies), 0 when they come from the part. A
-- simulated inspection never serves as the baseline of a real one (the
-- library refuses it). Rows recorded before this migration hold NULL: the
-- store did not record it then, and rows are never updated. A new row says
-- 0 or 1; only a correction of a row that holds NULL may keep NULL.
--
-- hours_reason: the recorded reason (a documented correction of the
-- aircraft's records) that lets an inspection's flight hours or cycles be
-- lower than an earlier inspection's of the same airframe, or higher than a
-- later one's; NULL when they are in order.

ALTER TABLE inspection ADD COLUMN simulated INTEGER
    CHECK (simulated IS NULL OR simulated IN (0, 1));
ALTER TABLE inspection ADD COLUMN hours_reason TEXT
    CHECK (hours_reason IS NULL OR length(hours_reason) > 0);

CREATE TRIGGER inspection_simulated_said BEFORE INSERT ON inspection
WHEN NEW.simulated IS NULL
 AND (NEW.supersedes IS NULL
      OR (SELECT p.simulated FROM inspection p WHERE p.id = NEW.supersedes) IS NOT NULL)
BEGIN SELECT RAISE(ABORT, 'an inspection must say whether its data are simulated'); END;
