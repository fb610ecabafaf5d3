-- hexvigil's per-cell baselines and outlier tests over an export, in SQL (docs/export.md).
--
-- Reads the export's tables as relations named cell_weeks, cell_week_changesets, changesets
-- and cell_neighbours (Hive partitions week and base as columns), and a one-row relation
-- params:
--   report_start DATE     Monday of the report week
--   window_start DATE     Monday of the first history week (report_start - 7 * history_weeks)
--   history_weeks INTEGER weeks of history (0: nothing is tested)
--   first_region VARCHAR  the first region, which also counts edits that could not be placed
--   offshore BOOLEAN      whether offshore fabrication is tested (false with --land none)
--   fdr, min_ratio, floor_mean, min_beta, max_beta, min_dispersion DOUBLE  as in docs/methods.md
-- scripts/duckdb/run_baseline.py sets these up for DuckDB. It writes three views:
--   tests(region, kind, cell, cell_hex, observed, expected, p_value, q_value, own_history, outlier)
--   region_counts(region, edits, creates, modifies, deletes, changesets, mappers, newcomers,
--                 flagged_changesets)                         the report week
--   region_baseline(region, edits, deletes, newcomers, changesets)  means over history weeks
-- Two places use DuckDB-only spellings, marked "engine-specific"; docs/export.md gives their
-- Spark SQL equivalents.

-- Each kind's minimum excess over the expectation (src/detect.rs, min_excess).
CREATE OR REPLACE TEMPORARY VIEW kinds AS
SELECT * FROM (VALUES
    ('deletion_burst', 10.0),
    ('newcomer_surge', 4.0),
    ('offshore_fabrication', 5.0),
    ('rename_spam', 5.0),
    ('score_hotspot', 10.0)
) AS k(kind, min_excess);

-- The window's cell-weeks; w = 0 is the first history week, w = history_weeks the report week.
CREATE OR REPLACE TEMPORARY VIEW win AS
SELECT cw.cell, cw.cell_hex, cw.region, cw.deleted_features, cw.newcomers, cw.offshore_creates,
       cw.spam_renames, cw.flagged_edits,
       -- engine-specific: whole days between two dates
       CAST(date_diff('day', p.window_start, cw.week_start) / 7 AS INTEGER) AS w
FROM cell_weeks cw CROSS JOIN params p
WHERE cw.week_start BETWEEN p.window_start AND p.report_start;

-- Every kind's count per cell-week (CellWeek::value in src/cells.rs).
CREATE OR REPLACE TEMPORARY VIEW vals AS
SELECT cell, w, 'deletion_burst' AS kind, deleted_features AS x FROM win
UNION ALL SELECT cell, w, 'newcomer_surge', newcomers FROM win
UNION ALL SELECT cell, w, 'offshore_fabrication', offshore_creates FROM win
UNION ALL SELECT cell, w, 'rename_spam', spam_renames FROM win
UNION ALL SELECT cell, w, 'score_hotspot', flagged_edits FROM win;

-- Cells with an edit anywhere in the window: the tested cells (when in a region) and the
-- neighbours whose histories give the week-to-week spread.
CREATE OR REPLACE TEMPORARY VIEW active AS
SELECT cell, min(cell_hex) AS cell_hex, min(region) AS region,
       max(CASE WHEN w < p.history_weeks THEN 1 ELSE 0 END) AS own_history
FROM win CROSS JOIN params p
GROUP BY cell;

-- Per active cell and kind: sum and sum of squares over the history weeks, and the report
-- week's count (weeks without a row count 0).
CREATE OR REPLACE TEMPORARY VIEW hist AS
SELECT a.cell, k.kind,
       CAST(coalesce(sum(CASE WHEN v.w < p.history_weeks THEN v.x END), 0) AS DOUBLE) AS s,
       CAST(coalesce(sum(CASE WHEN v.w < p.history_weeks THEN v.x * v.x END), 0) AS DOUBLE) AS s2,
       coalesce(max(CASE WHEN v.w = p.history_weeks THEN v.x END), 0) AS observed
FROM active a CROSS JOIN kinds k CROSS JOIN params p
LEFT JOIN vals v ON v.cell = a.cell AND v.kind = k.kind
GROUP BY a.cell, k.kind;

-- Prior (method of moments over every neighbourhood cell-week, zeros included) and pooled
-- dispersion (over active neighbours with a positive mean), per tested cell and kind.
CREATE OR REPLACE TEMPORARY VIEW fitted AS
SELECT t.cell, t.kind,
       count(*) * p.history_weeks AS n_samples,
       coalesce(sum(h.s), 0) AS sum_x,
       coalesce(sum(h.s2), 0) AS sum_x2,
       sum(CASE WHEN p.history_weeks >= 2 AND h.s > 0
                THEN (h.s / p.history_weeks) * (h.s / p.history_weeks) END) AS disp_num,
       sum(CASE WHEN p.history_weeks >= 2 AND h.s > 0
                THEN greatest((h.s2 - h.s * h.s / p.history_weeks) / (p.history_weeks - 1)
                              - h.s / p.history_weeks, 0) END) AS disp_den
FROM (SELECT a.cell, k.kind FROM active a CROSS JOIN kinds k CROSS JOIN params p
      WHERE a.region IS NOT NULL AND p.history_weeks > 0
        AND (k.kind <> 'offshore_fabrication' OR p.offshore)) t
CROSS JOIN params p
JOIN cell_neighbours nb ON nb.cell = t.cell
LEFT JOIN hist h ON h.cell = nb.neighbour AND h.kind = t.kind
GROUP BY t.cell, t.kind, p.history_weeks;

-- The negative-binomial predictive distribution (src/baseline.rs).
CREATE OR REPLACE TEMPORARY VIEW predictive AS
WITH moments AS (
    SELECT f.*, f.sum_x / f.n_samples AS m,
           f.sum_x2 / f.n_samples - (f.sum_x / f.n_samples) * (f.sum_x / f.n_samples) AS v,
           CASE WHEN f.disp_den > 0 THEN greatest(f.disp_num / f.disp_den, p.min_dispersion) END AS k
    FROM fitted f CROSS JOIN params p
), prior AS (
    SELECT mo.*,
           CASE WHEN mo.v > mo.m AND mo.m > 0
                THEN least(greatest(mo.m / (mo.v - mo.m), p.min_beta), p.max_beta)
                ELSE p.max_beta END AS beta
    FROM moments mo CROSS JOIN params p
), posterior AS (
    SELECT pr.cell, pr.kind, pr.k,
           greatest(pr.m, p.floor_mean) * pr.beta + h.s AS a,
           pr.beta + p.history_weeks AS b,
           h.observed
    FROM prior pr CROSS JOIN params p
    JOIN hist h ON h.cell = pr.cell AND h.kind = pr.kind
), shaped AS (
    SELECT po.*, po.a / po.b AS mu,
           CASE WHEN po.k IS NULL THEN po.a
                ELSE 1.0 / (1.0 / po.a + 1.0 / po.k + 1.0 / (po.a * po.k)) END AS r
    FROM posterior po
)
SELECT cell, kind, observed, r, mu,
       r / (r + mu) AS p,
       ln(r) - ln(r + mu) AS ln_p,
       ln(mu) - ln(r + mu) AS ln_q,
       r * (1.0 - r / (r + mu)) / (r / (r + mu)) AS expected
FROM shaped;

-- Upper tail P(X >= observed): above the mean, the sum of the pmf from the observed count up,
-- until the remaining terms (a geometric series with ratio rho < 1) fall below 1e-17 of the
-- sum; otherwise one minus the pmf below the observed count.
CREATE OR REPLACE TEMPORARY VIEW terms AS
WITH spans AS (
    SELECT pd.*,
           observed > expected AS upper,
           CASE WHEN observed > expected
                THEN greatest(CASE WHEN r > 1 THEN (observed + r) / (observed + 1.0) ELSE 1.0 END
                              * exp(ln_q), 1e-300)
           END AS rho
    FROM predictive pd
    WHERE observed > 0
), counted AS (
    SELECT s.*,
           CASE WHEN upper THEN observed ELSE 0 END AS j0,
           CASE WHEN upper
                THEN CAST(least(1000000, greatest(64, ceil(ln(1e-17 * (1 - rho)) / ln(rho)))) AS BIGINT)
                ELSE observed END AS n_terms
    FROM spans s
)
SELECT cell, kind, upper, j,
       exp(lgamma(j + r) - lgamma(r) - lgamma(j + 1.0) + r * ln_p + j * ln_q) AS pmf
FROM (
    -- engine-specific: one row per j in [j0, j0 + n_terms)
    SELECT c.*, unnest(range(c.j0, c.j0 + c.n_terms)) AS j FROM counted c
);

CREATE OR REPLACE TEMPORARY VIEW tails AS
SELECT pd.cell, pd.kind, pd.observed, pd.expected,
       CASE WHEN pd.observed = 0 THEN 1.0
            WHEN pd.observed > pd.expected THEN least(1.0, t.total)
            ELSE least(1.0, greatest(0.0, 1.0 - t.total)) END AS p_value
FROM predictive pd
LEFT JOIN (SELECT cell, kind, sum(pmf) AS total FROM terms GROUP BY cell, kind) t
       ON t.cell = pd.cell AND t.kind = pd.kind;

-- Benjamini-Hochberg q-values across each region's tested cells, per kind; then the minimum
-- effect size, and score hotspots dropped where another kind already flags the cell.
CREATE OR REPLACE TEMPORARY VIEW tests AS
WITH ranked AS (
    SELECT ta.*, a.region, a.cell_hex, a.own_history,
           row_number() OVER (PARTITION BY a.region, ta.kind ORDER BY ta.p_value, ta.cell) AS rk,
           count(*) OVER (PARTITION BY a.region, ta.kind) AS m
    FROM tails ta JOIN active a ON a.cell = ta.cell
), adjusted AS (
    SELECT ra.*,
           least(1.0, min(ra.p_value * ra.m / ra.rk) OVER (
               PARTITION BY ra.region, ra.kind ORDER BY ra.rk DESC
               ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW)) AS q_value
    FROM ranked ra
), judged AS (
    SELECT ad.*,
           ad.q_value <= p.fdr
           AND ad.observed - ad.expected >= k.min_excess
           AND ad.observed >= p.min_ratio * ad.expected AS raw_outlier
    FROM adjusted ad CROSS JOIN params p JOIN kinds k ON k.kind = ad.kind
)
SELECT j.region, j.kind, j.cell, j.cell_hex, j.observed, j.expected, j.p_value, j.q_value,
       j.own_history = 1 AS own_history,
       j.raw_outlier AND NOT (j.kind = 'score_hotspot' AND max(
           CASE WHEN j.kind <> 'score_hotspot' AND j.raw_outlier THEN 1 ELSE 0 END
       ) OVER (PARTITION BY j.cell) = 1) AS outlier
FROM judged j;

-- The report week's counts per region; edits that could not be placed count in the first.
CREATE OR REPLACE TEMPORARY VIEW region_counts AS
WITH rows_ AS (
    SELECT coalesce(d.region, CASE WHEN d.cell IS NULL THEN p.first_region END) AS region, d.*
    FROM cell_week_changesets d CROSS JOIN params p
    WHERE d.week_start = p.report_start
)
SELECT r.region,
       sum(r.edits) AS edits, sum(r.creates) AS creates, sum(r.modifies) AS modifies,
       sum(r.deletes) AS deletes,
       count(DISTINCT r.changeset) AS changesets,
       count(DISTINCT r.uid) AS mappers,
       count(DISTINCT CASE WHEN r.newcomer_edits > 0 THEN r.uid END) AS newcomers,
       count(DISTINCT CASE WHEN c.flagged THEN r.changeset END) AS flagged_changesets
FROM rows_ r
LEFT JOIN changesets c ON c.changeset = r.changeset
WHERE r.region IS NOT NULL
GROUP BY r.region;

-- A usual week per region: the mean over the history weeks (weeks without edits count 0).
CREATE OR REPLACE TEMPORARY VIEW region_baseline AS
WITH weekly AS (
    SELECT d.region, d.week_start,
           sum(d.edits) AS edits, sum(d.deletes) AS deletes,
           count(DISTINCT CASE WHEN d.newcomer_edits > 0 THEN d.uid END) AS newcomers,
           count(DISTINCT d.changeset) AS changesets
    FROM cell_week_changesets d CROSS JOIN params p
    WHERE d.region IS NOT NULL
      AND d.week_start >= p.window_start AND d.week_start < p.report_start
    GROUP BY d.region, d.week_start
)
SELECT w.region,
       sum(w.edits) / greatest(p.history_weeks, 1) AS edits,
       sum(w.deletes) / greatest(p.history_weeks, 1) AS deletes,
       sum(w.newcomers) / greatest(p.history_weeks, 1) AS newcomers,
       sum(w.changesets) / greatest(p.history_weeks, 1) AS changesets
FROM weekly w CROSS JOIN params p
GROUP BY w.region, p.history_weeks;
