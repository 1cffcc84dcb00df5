/* Model designs: coefficient layout and labels, error messages naming model, parameter and level,
 * rank deficiency (a column that is a linear combination of others makes X'X singular: Golub & Van
 * Loan 2013, Matrix Computations, section 5.5), nesting of designs, and permutation within cells
 * (Fisher-Yates keeps the multiset of values: Knuth, TAOCP vol. 2, 3.4.2). */
#include "design/model.h"
#include "fit_testutil.h"
#include "harness.h"

#include <gsl/gsl_errno.h>
#include <math.h>

static int contains(const char *hay, const char *needle) { return strstr(hay, needle) != NULL; }

/* bl_model_nested_in as 1 nested, 0 not, -1 failed. */
static int nested_in(const bl_model *a, const bl_model *b)
{
    int nested = 0;
    bl_error e = {0};
    return bl_model_nested_in(a, b, &nested, &e) == BL_OK ? nested : -1;
}

/* The trials every case uses, made once: simulated, plus theta2 and gap (below); freed at exit. */
static bl_trials *shared_trials;

static void trials_free(void) { bl_trials_destroy(shared_trials); }

static bl_trials *trials(void)
{
    if (shared_trials) return shared_trials;
    sim_truth tr = {.n = 240,
                    .n_participants = 3,
                    .a = {1.4, 1.0},
                    .a_slope = {0.2, 0.0},
                    .v = {2.0, 1.2, 0.5},
                    .v_slope = -0.2,
                    .t0 = 0.3};
    bl_trials *t = sim_trials(&tr, 5);
    /* theta2 = 2 theta - 1 (collinear with theta and the intercept); "gap" is missing on trial 3. */
    int ct = bl_table_find(t->table, "theta");
    double *th2 = malloc(t->n * sizeof *th2), *gap = malloc(t->n * sizeof *gap);
    for (size_t i = 0; i < t->n; i++) {
        th2[i] = 2 * t->table->cols[ct].num[i] - 1;
        gap[i] = i == 2 ? NAN : (double)i;
    }
    bl_table_add_numeric(t->table, "theta2", th2, NULL);
    bl_table_add_numeric(t->table, "gap", gap, NULL);
    free(th2);
    free(gap);
    shared_trials = t;
    atexit(trials_free);
    return t;
}

/* The per-level model: threshold per context with a theta slope per context, drift per context x difficulty. */
static bl_slope_spec per_level_slope = {"theta", col_context, 1};
static char *per_level_drift[] = {"context", "difficulty"};

static void per_level_spec(bl_model_spec *s)
{
    spec_default(s, "plain");
    s->param[BL_THRESHOLD].per = col_context;
    s->param[BL_THRESHOLD].n_per = 1;
    s->param[BL_THRESHOLD].slopes = &per_level_slope;
    s->param[BL_THRESHOLD].n_slopes = 1;
    s->param[BL_DRIFT].per = per_level_drift;
    s->param[BL_DRIFT].n_per = 2;
}

static bl_model *per_level_model(bl_model_spec *s)
{
    bl_error err = {0};
    bl_model *m = NULL;
    per_level_spec(s);
    check_true(bl_model_build(s, trials(), NULL, &m, &err) == BL_OK, "per-level model builds (%s)", err.message);
    return m;
}

/* Defaults: threshold, drift, nondecision one coefficient each. */
HARNESS_CASE(default_model)
{
    bl_trials *t = trials();
    bl_error err = {0};
    bl_model *m = NULL;
    bl_model_spec s;
    spec_default(&s, "plain");
    check_true(bl_model_build(&s, t, NULL, &m, &err) == BL_OK, "default model builds");
    check_true(bl_model_n_coef(m) == 3, "default model: 3 coefficients");
    check_true(bl_model_coef(m, 0)->param == BL_THRESHOLD && bl_model_coef(m, 1)->param == BL_DRIFT &&
                   bl_model_coef(m, 2)->param == BL_NONDECISION,
               "coefficients in parameter order");
    check_true(!strcmp(bl_model_coef(m, 0)->term, "intercept") && !strcmp(bl_model_coef(m, 0)->level, ""),
               "single intercept: term 'intercept', empty level");
    check_true(bl_model_n_trials(m) == t->n, "every kept trial is used");
    bl_model_destroy(m);
}

/* Per-level intercepts and per-level slopes; levels in order of first appearance. */
HARNESS_CASE(per_level_model)
{
    bl_model_spec s;
    bl_model *m = per_level_model(&s);
    if (!m) return;
    check_true(bl_model_n_coef(m) == 2 + 2 + 6 + 1, "2 + 2 + 6 + 1 coefficients (got %zu)", bl_model_n_coef(m));
    check_true(!strcmp(bl_model_coef(m, 0)->level, "rich") && !strcmp(bl_model_coef(m, 1)->level, "lean"),
               "threshold levels rich, lean");
    check_true(!strcmp(bl_model_coef(m, 2)->term, "theta") && !strcmp(bl_model_coef(m, 3)->level, "lean") &&
                   bl_model_coef(m, 2)->slope == 0,
               "slope coefficients named by regressor and level");
    check_true(!strcmp(bl_model_coef(m, 4)->level, "rich:easy") && !strcmp(bl_model_coef(m, 5)->level, "lean:easy"),
               "level combinations joined with ':' (got %s, %s)", bl_model_coef(m, 4)->level,
               bl_model_coef(m, 5)->level);
    bl_model_destroy(m);
}

/* Selecting trials: excluded rows and `use` flags are left out. */
HARNESS_CASE(trial_selection)
{
    bl_trials *t = trials();
    bl_error err = {0};
    bl_model_spec s;
    per_level_spec(&s);
    unsigned char *use = calloc(t->n, 1);
    for (size_t i = 0; i < t->n; i++) use[i] = t->participant[i] == 1;
    t->excluded[t->n / 3 + 1] = "test";
    bl_model *mp = NULL;
    check_true(bl_model_build(&s, t, use, &mp, &err) == BL_OK, "one participant's trials build");
    check_true(bl_model_n_trials(mp) == t->n / 3 - 1, "participant 2 without its excluded trial: %zu trials",
               bl_model_n_trials(mp));
    t->excluded[t->n / 3 + 1] = NULL;
    bl_model_destroy(mp);
    free(use);
}

/* Copy and permutation within cells keep the values of each cell. */
HARNESS_CASE(copy_and_permutation)
{
    bl_trials *t = trials();
    bl_error err = {0};
    bl_model_spec s;
    bl_model *m = per_level_model(&s);
    if (!m) return;
    bl_model *mc = NULL;
    check_true(bl_model_copy(m, &mc, &err) == BL_OK && bl_model_n_coef(mc) == bl_model_n_coef(m), "copy");
    size_t *cell = malloc(t->n * sizeof *cell);
    /* Cells: participant x context (the model's condition columns). */
    for (size_t k = 0; k < t->n; k++) cell[k] = 2 * t->participant[bl_model_row(mc, k)] + bl_model_row(mc, k) % 2;
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 3);
    check_true(bl_model_permute_slope(mc, BL_THRESHOLD, 0, cell, -1, rng, &err) == BL_OK, "permute");
    double coef[11] = {1, 1, 1, 0, 1, 1, 1, 1, 1, 1, 0.2};
    double sums_orig[6] = {0}, sums_perm[6] = {0};
    size_t moved = 0;
    for (size_t k = 0; k < t->n; k++) {
        bl_wiener_params a, b;
        bl_model_predict(m, coef, k, &a);
        bl_model_predict(mc, coef, k, &b);
        /* threshold = 1 + 1 * theta on rich trials, 1 on lean: the theta values of rich trials. */
        sums_orig[cell[k]] += a.value[BL_THRESHOLD] * a.value[BL_THRESHOLD];
        sums_perm[cell[k]] += b.value[BL_THRESHOLD] * b.value[BL_THRESHOLD];
        moved += a.value[BL_THRESHOLD] != b.value[BL_THRESHOLD];
    }
    for (int c = 0; c < 6; c++)
        check_rel(sums_perm[c], sums_orig[c], 1e-12, "cell %d keeps its values after shuffling", c);
    check_true(moved > t->n / 4, "shuffling moved values (%zu)", moved);
    bl_model_restore_slopes(mc);
    moved = 0;
    for (size_t k = 0; k < t->n; k++) {
        bl_wiener_params a, b;
        bl_model_predict(m, coef, k, &a);
        bl_model_predict(mc, coef, k, &b);
        moved += a.value[BL_THRESHOLD] != b.value[BL_THRESHOLD];
    }
    check_true(moved == 0, "restore brings the observed values back");
    gsl_rng_free(rng);
    free(cell);
    bl_model_destroy(mc);
    bl_model_destroy(m);
}

/* Nesting: the default model is nested in the per-level model, not the other way round. */
HARNESS_CASE(nesting)
{
    bl_trials *t = trials();
    bl_error err = {0};
    bl_model_spec s;
    bl_model *m = per_level_model(&s);
    if (!m) return;
    bl_model_spec s0;
    spec_default(&s0, "plain");
    bl_model *m0 = NULL;
    bl_model_build(&s0, t, NULL, &m0, &err);
    check_true(nested_in(m0, m) == 1, "single intercepts are nested in per-level intercepts + slopes");
    check_true(nested_in(m, m0) == 0, "per-level model is not nested in the single-intercept model");
    bl_model_spec s1;
    spec_default(&s1, "drift-by-participant");
    s1.param[BL_DRIFT].per = col_participant;
    s1.param[BL_DRIFT].n_per = 1;
    bl_model *m1 = NULL;
    bl_model_build(&s1, t, NULL, &m1, &err);
    check_true(nested_in(m1, m) == 0, "drift per participant is not nested in drift per context:difficulty");
    bl_model_spec s2 = s0;
    s2.param[BL_START].is_fixed = 0;
    bl_model *m2 = NULL;
    bl_model_build(&s2, t, NULL, &m2, &err);
    check_true(nested_in(m0, m2) == 1, "fixed start 0.5 is nested in a free start");
    bl_model_destroy(m0);
    bl_model_destroy(m1);
    bl_model_destroy(m2);
    bl_model_destroy(m);
}

/* Errors name the model, the parameter and the culprit. */
HARNESS_CASE(unknown_regressor_or_column)
{
    bl_trials *t = trials();
    bl_error err = {0};
    bl_model *m = NULL;
    bl_model_spec s;
    per_level_spec(&s);
    bl_model_spec e = s;
    bl_slope_spec bad = {"thetaa", col_context, 1};
    e.name = "typo";
    e.param[BL_THRESHOLD].slopes = &bad;
    bl_status st = bl_model_build(&e, t, NULL, &m, &err);
    check_true(st == BL_ERR_MODEL && contains(err.message, "'typo'") && contains(err.message, "'threshold'") &&
                   contains(err.message, "'thetaa'"),
               "unknown regressor: %s", err.message);
    check_true(m == NULL, "no model on error");

    bl_model_spec e2 = s;
    char *nocol[] = {"reward"};
    e2.param[BL_DRIFT].per = nocol;
    e2.param[BL_DRIFT].n_per = 1;
    st = bl_model_build(&e2, t, NULL, &m, &err);
    check_true(st == BL_ERR_MODEL && contains(err.message, "'drift'") && contains(err.message, "'reward'"),
               "unknown column: %s", err.message);
}

/* Rank deficiency: constant within levels, collinear, no information at a level. */
HARNESS_CASE(rank_deficiency)
{
    bl_trials *t = trials();
    bl_error err = {0};
    bl_model *m = NULL;
    bl_status st;
    bl_model_spec s;
    per_level_spec(&s);
    int ct = bl_table_find(t->table, "theta");
    /* A slope on a regressor constant within each level duplicates that level's intercept. */
    bl_model_spec e3 = s;
    bl_slope_spec flat = {"flat", col_context, 1};
    e3.name = "flat-slope";
    e3.param[BL_THRESHOLD].slopes = &flat;
    st = bl_model_build(&e3, t, NULL, &m, &err);
    check_true(st == BL_ERR_MODEL && contains(err.message, "'flat-slope'") && contains(err.message, "'threshold'") &&
                   contains(err.message, "slope 'flat' at level 'rich' is collinear with intercept at level 'rich'") &&
                   contains(err.message, "rank-deficient"),
               "constant regressor within levels: %s", err.message);

    /* Two collinear regressors: theta2 = 2 theta - 1 with a shared intercept. */
    bl_model_spec e4;
    spec_default(&e4, "collinear");
    bl_slope_spec two_sl[2] = {{"theta", NULL, 0}, {"theta2", NULL, 0}};
    e4.param[BL_DRIFT].slopes = two_sl;
    e4.param[BL_DRIFT].n_slopes = 2;
    st = bl_model_build(&e4, t, NULL, &m, &err);
    check_true(st == BL_ERR_MODEL && contains(err.message, "'drift'") && contains(err.message, "slope 'theta2'") &&
                   contains(err.message, "collinear"),
               "collinear regressors: %s", err.message);

    /* A slope for a level where the regressor is always 0 cannot be estimated. */
    double *z = malloc(t->n * sizeof *z);
    for (size_t i = 0; i < t->n; i++) z[i] = (i % 2) ? 0.0 : t->table->cols[ct].num[i];
    if (bl_table_find(t->table, "rich_only") < 0) bl_table_add_numeric(t->table, "rich_only", z, NULL);
    free(z);
    bl_model_spec e5 = s;
    bl_slope_spec ro = {"rich_only", col_context, 1};
    e5.param[BL_THRESHOLD].slopes = &ro;
    st = bl_model_build(&e5, t, NULL, &m, &err);
    check_true(st == BL_ERR_MODEL && contains(err.message, "slope 'rich_only' at level 'lean'"),
               "slope at a level with no information: %s", err.message);
}

HARNESS_CASE(missing_regressor_value)
{
    bl_trials *t = trials();
    bl_error err = {0};
    bl_model *m = NULL;
    bl_status st;
    /* A regressor missing on a fitted trial is an error; excluding that trial resolves it. */
    bl_model_spec e6;
    spec_default(&e6, "gappy");
    bl_slope_spec gs = {"gap", NULL, 0};
    e6.param[BL_DRIFT].slopes = &gs;
    e6.param[BL_DRIFT].n_slopes = 1;
    st = bl_model_build(&e6, t, NULL, &m, &err);
    check_true(st == BL_ERR_MODEL && contains(err.message, "'gap'") && contains(err.message, "missing") &&
                   contains(err.message, "trial 3"),
               "missing regressor value: %s", err.message);
    t->excluded[2] = "rt_min";
    st = bl_model_build(&e6, t, NULL, &m, &err);
    check_true(st == BL_OK, "the same model builds once that trial is excluded");
    bl_model_destroy(m);
    t->excluded[2] = NULL;
}

HARNESS_CASE(text_column_regressor)
{
    bl_trials *t = trials();
    bl_error err = {0};
    bl_model *m = NULL;
    bl_status st;
    /* Text column as a regressor. */
    bl_model_spec e7;
    spec_default(&e7, "text");
    bl_slope_spec txt = {"context", NULL, 0};
    e7.param[BL_DRIFT].slopes = &txt;
    e7.param[BL_DRIFT].n_slopes = 1;
    st = bl_model_build(&e7, t, NULL, &m, &err);
    check_true(st == BL_ERR_MODEL && contains(err.message, "'context'") && contains(err.message, "not numeric"),
               "text column as regressor: %s", err.message);
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(default_model),
        HARNESS_ENTRY(per_level_model),
        HARNESS_ENTRY(trial_selection),
        HARNESS_ENTRY(copy_and_permutation),
        HARNESS_ENTRY(nesting),
        HARNESS_ENTRY(unknown_regressor_or_column),
        HARNESS_ENTRY(rank_deficiency),
        HARNESS_ENTRY(missing_regressor_value),
        HARNESS_ENTRY(text_column_regressor),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
