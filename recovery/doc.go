// Package recovery runs a study's synthetic experiment: it draws synthetic
// participants from every generating hypothesis, fits every candidate by
// maximum likelihood, and summarises identifiability (confusion and
// inversion matrices, parameter recovery, mimicry), the group level
// (random-effects model selection over replicate groups) and the ranking of
// designs; it writes the report as JSON and its fits as CSV (model.md
// §4–§8). recovery holds the numbers and the verdicts' prose, never a page
// or a chart: report.html and the predictions page are package pages's.
//
// Conventions. Criteria are "smaller is better" (AIC, AICc, BIC); ln L is
// natural. Every random draw comes from a stream seeded by the study seed
// and the stream's path (design, generator, participant, purpose), so a
// report depends only on the study and its seed, never on the number of
// workers or the order in which shards finish. Shard results (ShardResult)
// are plain values that may be stored and assembled later (the service
// stores them with encoding/gob, which keeps NaN). NaN in the report's
// JSON is written as null.
package recovery
