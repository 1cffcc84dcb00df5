/* Writes an invented trial table for the fit CLI tests and the docs example: responses drawn with
 * the engine's exact sampler from a known regression (threshold rises with theta in the rich
 * context only; drift falls slightly with beta).
 * usage: fit_make_trials OUT.csv N_PER_ANIMAL N_ANIMALS SEED [stimulus]
 * Columns: animal, trial, context, difficulty, theta, beta, rt, correct (accuracy coding) or, with
 * "stimulus", tone (high/low) and choice (high/low). */
#include "engine/wiener_sample.h"
#include "bandlink/wiener.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

int main(int argc, char **argv)
{
    if (argc < 5) {
        fprintf(stderr, "usage: fit_make_trials OUT.csv N_PER_ANIMAL N_ANIMALS SEED [stimulus]\n");
        return 2;
    }
    gsl_set_error_handler_off();
    long n = atol(argv[2]), animals = atol(argv[3]);
    unsigned long seed = strtoul(argv[4], NULL, 10);
    int stimulus = argc > 5 && !strcmp(argv[5], "stimulus");
    FILE *f = fopen(argv[1], "w");
    if (!f || n <= 0 || animals <= 0) {
        fprintf(stderr, "fit_make_trials: cannot write %s\n", argv[1]);
        return 1;
    }
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed);
    static const char *ctx[2] = {"rich", "lean"}, *dif[3] = {"easy", "medium", "hard"};
    const double v[3] = {2.0, 1.3, 0.6};
    fprintf(f, stimulus ? "animal,trial,context,difficulty,theta,beta,rt,tone,choice\n"
                        : "animal,trial,context,difficulty,theta,beta,rt,correct\n");
    for (long a = 0; a < animals; a++)
        for (long i = 0; i < n; i++) {
            int c = (int)(gsl_rng_uniform_int(rng, 2)), d = (int)(gsl_rng_uniform_int(rng, 3));
            double theta = gsl_ran_gaussian(rng, 1), beta = gsl_ran_gaussian(rng, 1);
            bl_wiener_params p;
            bl_wiener_params_default(&p);
            p.value[BL_THRESHOLD] = (c == 0 ? 1.5 + 0.25 * theta : 1.1);
            if (p.value[BL_THRESHOLD] < 0.5) p.value[BL_THRESHOLD] = 0.5;
            int high = stimulus ? (int)gsl_rng_uniform_int(rng, 2) : 1;
            double drift = v[d] - 0.15 * beta + 0.1 * (double)a;
            p.value[BL_DRIFT] = high ? drift : -drift;
            p.value[BL_NONDECISION] = 0.3;
            p.value[BL_START] = 0.5;
            int up;
            double rt;
            if (bl_wiener_sample(&p, rng, &up, &rt, NULL) != BL_OK) {
                fprintf(stderr, "fit_make_trials: sampler failed\n");
                return 1;
            }
            if (stimulus)
                fprintf(f, "rat%ld,%ld,%s,%s,%.6f,%.6f,%.4f,%s,%s\n", a + 1, i + 1, ctx[c], dif[d], theta, beta, rt,
                        high ? "high" : "low", up ? "high" : "low");
            else fprintf(f, "rat%ld,%ld,%s,%s,%.6f,%.6f,%.4f,%d\n", a + 1, i + 1, ctx[c], dif[d], theta, beta, rt, up);
        }
    gsl_rng_free(rng);
    return fclose(f) == 0 ? 0 : 1;
}
