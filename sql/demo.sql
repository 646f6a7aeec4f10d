-- groupfit demo report on the invented parcel-delivery data (datasets/).
-- Run from the repository root after building:
--     sqlite3 build/demo.db < datasets/build_demo.sql
--     sqlite3 build/demo.db < sql/demo.sql
.bail on
.load ./build/release/groupfit
.headers on
.mode box

.print
.print == 1. Do delivery times differ by carrier? One model, stored as a BLOB.
DROP TABLE IF EXISTS temp.fits;
CREATE TEMP TABLE fits AS
  SELECT 'carrier' AS name, groupfit(minutes, carrier) AS model FROM deliveries
  UNION ALL
  SELECT 'carrier+distance+weight',
         groupfit(minutes, carrier, distance_km, weight_kg) FROM deliveries;
SELECT name, length(model) AS blob_bytes FROM fits;

.print
.print == 2. Row accounting and fit statistics (groupfit_summary)
SELECT rows_used, rows_dropped, dropped_null_response, dropped_null_group,
       dropped_null_covariate, levels, rank, df_resid,
       round(r_squared, 4) AS r_squared, round(resid_sd, 3) AS resid_sd,
       round(f_stat, 2) AS f_stat, printf('%.3g', p_value) AS p_value,
       round(aic, 1) AS aic
  FROM fits, groupfit_summary(fits.model) ORDER BY name;

.print
.print == 3. Observed and covariate-adjusted carrier means (groupfit_levels)
SELECT level AS carrier, n, round(mean, 2) AS mean, round(sd, 2) AS sd,
       round(adjusted_mean, 2) AS adjusted_mean, round(std_error, 3) AS std_error,
       round(ci_lower, 2) AS ci_lower, round(ci_upper, 2) AS ci_upper, covariates_at
  FROM groupfit_levels((SELECT model FROM fits WHERE name = 'carrier+distance+weight'),
                       'names=carrier, distance_km, weight_kg');

.print
.print == 4. Dummy coding: every carrier against amberpost (groupfit_coef)
SELECT term, label, compares, round(estimate, 3) AS estimate,
       round(std_error, 3) AS std_error, round(t_stat, 2) AS t_stat,
       printf('%.3g', p_value) AS p_value
  FROM groupfit_coef((SELECT model FROM fits WHERE name = 'carrier+distance+weight'),
                     'coding=dummy; base=amberpost; names=carrier, distance_km, weight_kg');

.print
.print == 5. Effect coding: each carrier against the mean of all carriers
SELECT term, label, compares, round(estimate, 3) AS estimate,
       round(std_error, 3) AS std_error, printf('%.3g', p_value) AS p_value,
       round(ci_lower, 3) AS ci_lower, round(ci_upper, 3) AS ci_upper
  FROM groupfit_coef((SELECT model FROM fits WHERE name = 'carrier+distance+weight'),
                     'coding=effect; names=carrier, distance_km, weight_kg')
 WHERE term = 'carrier';

.print
.print == 6. Every carrier, the one effect coding leaves out included (groupfit_deviations)
SELECT level AS carrier, reference, round(estimate, 3) AS estimate,
       round(std_error, 3) AS std_error, round(t_stat, 2) AS t_stat,
       printf('%.3g', p_value) AS p_value
  FROM groupfit_deviations((SELECT model FROM fits WHERE name = 'carrier+distance+weight'));

.print
.print == 7. Helmert and successive-difference codings of the same fit
SELECT 'helmert' AS coding, compares, round(estimate, 3) AS estimate,
       printf('%.3g', p_value) AS p_value
  FROM groupfit_coef((SELECT model FROM fits WHERE name = 'carrier+distance+weight'),
                     'coding=helmert') WHERE term = 'group'
UNION ALL
SELECT 'successive', compares, round(estimate, 3), printf('%.3g', p_value)
  FROM groupfit_coef((SELECT model FROM fits WHERE name = 'carrier+distance+weight'),
                     'coding=successive') WHERE term = 'group';

.print
.print == 8. Analysis of variance, Type III, and Welch's F without covariates (groupfit_tests)
SELECT 'with covariates' AS model, term, method, ss_type, df, round(df_denom, 1) AS df_denom,
       round(sum_sq, 1) AS sum_sq, round(f_stat, 2) AS f_stat,
       iif(p_value IS NULL, NULL, printf('%.3g', p_value)) AS p_value, round(partial_eta_sq, 4) AS partial_eta_sq,
       round(omega_sq, 4) AS omega_sq
  FROM groupfit_tests((SELECT model FROM fits WHERE name = 'carrier+distance+weight'),
                      'names=carrier, distance_km, weight_kg')
UNION ALL
SELECT 'carrier only', term, method, ss_type, df, round(df_denom, 1), round(sum_sq, 1),
       round(f_stat, 2), iif(p_value IS NULL, NULL, printf('%.3g', p_value)), round(partial_eta_sq, 4), round(omega_sq, 4)
  FROM groupfit_tests((SELECT model FROM fits WHERE name = 'carrier'), 'names=carrier');

.print
.print == 9. One model per region in one query, joined with the depots table
SELECT region, c.label AS carrier, round(c.estimate, 2) AS vs_mean_of_carriers,
       round(c.std_error, 2) AS std_error, printf('%.3g', c.p_value) AS p_value
  FROM (SELECT d.region, groupfit(minutes, carrier, distance_km, weight_kg) AS model
          FROM deliveries JOIN depots AS d USING (depot_id)
         GROUP BY d.region) AS seg,
       groupfit_coef(seg.model, 'coding=effect') AS c
 WHERE c.term = 'group'
 ORDER BY region, carrier;

.print
.print == 10. Models merge: per-depot models combined equal the one-pass model
WITH per_depot AS (
  SELECT depot_id, groupfit(minutes, carrier, distance_km, weight_kg) AS model
    FROM deliveries GROUP BY depot_id)
SELECT a.label, printf('%.12f', a.estimate) AS merged, printf('%.12f', b.estimate) AS one_pass
  FROM groupfit_coef((SELECT groupfit_merge(model) FROM per_depot), 'coding=effect') AS a
  JOIN groupfit_coef((SELECT model FROM fits WHERE name = 'carrier+distance+weight'),
                     'coding=effect') AS b USING (term, label);

.print
.print == 11. Analytic weights: depot-by-carrier averages weighted by their counts
SELECT c.label, round(c.estimate, 3) AS estimate, round(c.std_error, 3) AS std_error
  FROM (SELECT groupfit_weighted(n, avg_minutes, carrier) AS model
          FROM (SELECT depot_id, carrier, count(*) AS n, avg(minutes) AS avg_minutes
                  FROM deliveries WHERE minutes IS NOT NULL AND carrier IS NOT NULL
                 GROUP BY depot_id, carrier)) AS w,
       groupfit_coef(w.model, 'coding=dummy') AS c;

.print
.print == 12. Which carriers differ, once distance and weight are controlled for? (groupfit_pairs, Tukey-Kramer)
SELECT level_a, level_b, round(estimate, 2) AS difference, round(std_error, 3) AS std_error,
       printf('%.3g', p_value) AS p_raw, printf('%.3g', p_adjusted) AS p_tukey,
       round(ci_lower, 2) AS ci_lower, round(ci_upper, 2) AS ci_upper, interval
  FROM groupfit_pairs((SELECT model FROM fits WHERE name = 'carrier+distance+weight'));

.print
.print == 13. Every carrier against amberpost, many-to-one (Dunnett, with the model's correlations)
SELECT level_a, level_b, round(estimate, 2) AS difference, printf('%.3g', p_adjusted) AS p_dunnett,
       round(ci_lower, 2) AS ci_lower, round(ci_upper, 2) AS ci_upper, method
  FROM groupfit_pairs((SELECT model FROM fits WHERE name = 'carrier+distance+weight'),
                      'vs=amberpost');

.print
.print == 14. Planned contrasts and their joint test (groupfit_contrast)
SELECT contrast, kind, round(estimate, 3) AS estimate, round(std_error, 3) AS std_error,
       df, round(f_stat, 2) AS f_stat, iif(p_value IS NULL, NULL, printf('%.3g', p_value)) AS p_value
  FROM groupfit_contrast((SELECT model FROM fits WHERE name = 'carrier+distance+weight'),
                         'copperfox=1, driftwing=-1; amberpost=0.5, brightcart=0.5, emberline=-1');

.print
.print == 15. Adjusted means for a 25 km, 3 kg delivery (at=)
SELECT level AS carrier, round(adjusted_mean, 2) AS minutes, round(ci_lower, 2) AS ci_lower,
       round(ci_upper, 2) AS ci_upper, covariates_at
  FROM groupfit_levels((SELECT model FROM fits WHERE name = 'carrier+distance+weight'),
                       'names=carrier, distance_km, weight_kg; at=distance_km:25, weight_kg:3');

.print
.print == 16. Two factors: carrier by shift, with distance and weight (groupfit_cross)
CREATE TEMP TABLE two_way AS
  SELECT groupfit(minutes, groupfit_cross(carrier, shift), distance_km, weight_kg) AS model
    FROM deliveries;
SELECT term, method, ss_type, df, round(sum_sq, 1) AS sum_sq, round(f_stat, 2) AS f_stat,
       iif(p_value IS NULL, NULL, printf('%.3g', p_value)) AS p_value, note
  FROM groupfit_tests((SELECT model FROM two_way), 'names=carrier, shift, distance_km, weight_kg');

.print
.print == 17. Marginal means of each factor (every cell weighted equally)
SELECT term, level, n, round(mean, 2) AS raw_mean, round(adjusted_mean, 2) AS adjusted_mean,
       round(std_error, 3) AS std_error, weighting
  FROM groupfit_levels((SELECT model FROM two_way), 'names=carrier, shift, distance_km, weight_kg')
 WHERE term IN ('carrier', 'shift');

.print
.print == 18. Carriers compared within each shift (simple effects, Tukey-Kramer per shift; rows with adjusted p < 0.05)
SELECT within, level_a, level_b, round(estimate, 2) AS difference,
       printf('%.3g', p_adjusted) AS p_tukey, round(ci_lower, 2) AS ci_lower, round(ci_upper, 2) AS ci_upper
  FROM groupfit_pairs((SELECT model FROM two_way),
                      'names=carrier, shift, distance_km, weight_kg; by=shift')
 WHERE p_adjusted < 0.05;
