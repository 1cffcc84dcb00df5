/* Private: screening of the kept trials before any model is fitted, for data the Wiener model cannot
 * use or can use only partly (docs/degenerate-data.md). Errors for what makes a likelihood unbounded,
 * warnings for what weakens an estimate. */
#ifndef BL_SCREEN_H
#define BL_SCREEN_H

#include "bandlink/status.h"
#include "design/study.h"
#include "design/trials.h"

/* Screen the trials for the models study->models[models[k]], k < n_models:
 * - BL_ERR_MODEL when every RT of a threshold x drift cell is identical (the likelihood grows without
 *   bound as the threshold shrinks), naming the model, the cell and the RT;
 * - warnings for a cell whose responses all reach one boundary, for kept RTs faster than 0.1 s, and for
 *   separate fits with a single participant. */
bl_status bl_screen_trials(const bl_study *study, const bl_trials *trials, const size_t *models, size_t n_models,
                           bl_warnings *warn, bl_error *err);

#endif
