-- plyledger schema, migration 2: a site's method comes from the method
-- vocabulary (PL_VOCAB_METHOD in plyledger/store.h; tests/test_store.c
-- holds the two lists equal).
--
-- SQLite cannot add a CHECK to an existing table, so a trigger refuses an
-- insert (a new site or a correction of one) with an unknown method. Rows
-- already recorded are not touched.

CREATE TRIGGER site_method_known BEFORE INSERT ON site
WHEN NEW.method NOT IN ('flash-thermography', 'ultrasound-pulse-echo',
                        'ultrasound-through-transmission', 'eddy-current')
BEGIN SELECT RAISE(ABORT, 'site method is not one of the method vocabulary'); END;
