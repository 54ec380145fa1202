-- Why a target trigger is in no family (issue 12 item 3): 'quiet' (below
-- the clustering SNR and not placed with confidence) or 'novel' (far from
-- every family). NULL for members of a family.
ALTER TABLE family_members ADD COLUMN reason TEXT
    CHECK (reason IS NULL OR reason IN ('quiet', 'novel'));
