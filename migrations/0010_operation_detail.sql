-- What a running operation says about itself beyond its progress, as JSON: a reward fit's
-- iteration, log-likelihood and gradient norm so far. Written with each heartbeat, so every
-- process serving the operation's events sees it; NULL for kinds that say nothing more.
ALTER TABLE operations ADD COLUMN detail TEXT;
