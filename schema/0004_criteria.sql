-- plyledger schema, migration 4: criteria sets as plyledger/criteria.h
-- reads them. A set's rules are selected by method, quantity and site or
-- zone pattern, each with its own limits, so a row holds the whole set as
-- its canonical JSON (content_json, with its SHA-256) beside the header
-- fields a listing shows. The per-set limit columns of migration 1
-- (min_area_mm2 ... depth_change_mm) stay NULL for these rows.
--
-- Revisions are append-only: each revision is a row of its own (UNIQUE
-- (name, revision) of migration 1), never a correction of another.
-- example_values 1 marks invented example values, not approved data.

ALTER TABLE criteria ADD COLUMN format_version INTEGER;
ALTER TABLE criteria ADD COLUMN example_values INTEGER
    CHECK (example_values IS NULL OR example_values IN (0, 1));
ALTER TABLE criteria ADD COLUMN repeatability_area_mm2 REAL
    CHECK (repeatability_area_mm2 IS NULL OR repeatability_area_mm2 > 0);
ALTER TABLE criteria ADD COLUMN rule_count INTEGER
    CHECK (rule_count IS NULL OR rule_count > 0);
ALTER TABLE criteria ADD COLUMN content_json TEXT;
ALTER TABLE criteria ADD COLUMN content_sha256 TEXT
    CHECK (content_sha256 IS NULL OR
           (length(content_sha256) = 64 AND content_sha256 NOT GLOB '*[^0-9a-f]*'));

CREATE INDEX criteria_name ON criteria(name, id);

-- A set enters whole: its content, format version, marking and digest.
CREATE TRIGGER criteria_content_required BEFORE INSERT ON criteria
WHEN NEW.content_json IS NULL OR NEW.format_version IS NULL
  OR NEW.example_values IS NULL OR NEW.content_sha256 IS NULL OR NEW.rule_count IS NULL
  OR json_type(NEW.content_json) IS NOT 'object'
BEGIN SELECT RAISE(ABORT, 'criteria rows hold the whole set: content, format version, example marking, rule count and digest'); END;

-- A revision is a new row, not a correction of an earlier one.
CREATE TRIGGER criteria_no_correction BEFORE INSERT ON criteria
WHEN NEW.supersedes IS NOT NULL OR NEW.key IS NOT NULL
BEGIN SELECT RAISE(ABORT, 'criteria is append-only: record a new revision instead'); END;
