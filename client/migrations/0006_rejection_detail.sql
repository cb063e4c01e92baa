-- What a server's refusal of a local entry names besides its reason: the
-- field at fault, or, for a refusal by a rule of who may do what, the rule
-- the entry breaks. Entries refused before this release keep both empty;
-- their message says it in words.
ALTER TABLE events ADD COLUMN field TEXT NOT NULL DEFAULT '';
ALTER TABLE events ADD COLUMN rule TEXT NOT NULL DEFAULT '';
