/* bandlink: trial-wise oscillation band power linked to the parameters of the Wiener diffusion model.
 * The whole public API: include this header and link with `pkg-config --libs bandlink`.
 *
 *   bandlink/status.h    status codes, one-line errors, warnings
 *   bandlink/wiener.h    the Wiener first-passage time: density, gradient, CDF, quantiles, moments
 *   bandlink/analysis.h  one analysis of a study: band power, fits, comparison, outputs
 *   bandlink/simulate.h  synthetic studies with known truth
 *   bandlink/prediction.h  predictions of a fitted model (fits.json) with delta-method intervals
 *
 * Research use only; not a medical device. */
#ifndef BANDLINK_H
#define BANDLINK_H

#include "bandlink/analysis.h"
#include "bandlink/prediction.h"
#include "bandlink/simulate.h"
#include "bandlink/status.h"
#include "bandlink/wiener.h"

#endif
