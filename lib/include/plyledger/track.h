/*
 * plyledger/track.h - an indication followed through every inspection of
 * its site (a track), its growth rate and the forecast of when it would
 * reach its criteria limit.
 *
 * Tracks are built from the record, never stored apart from it: from the
 * comparisons of each inspection with its governing baseline (the latest
 * recorded comparison of that inspection against a baseline or post-repair
 * inspection, done, of the chosen quantity and label), their indications
 * and their changes (plyledger/compare.h). Every comparison against the
 * same baseline puts both sides' indications on that baseline's grid, so
 * one baseline opens an era in which indications are followed:
 *   1. the members of one change (a group of matched indications: one
 *      each side, a split, a merge) belong to one track;
 *   2. the baseline's own indications are the same in every comparison of
 *      the era (the same map): two with centroids within 1.5 px are one;
 *   3. a current indication of one inspection and one of a later
 *      inspection of the era are the same feature when either's centroid
 *      lies inside the other's bounding box widened by
 *      PL_TRACK_LINK_MARGIN_PX pixels (both are on the baseline grid, and
 *      registered within a fraction of a pixel).
 * A track is a connected component of these links. At each inspection it
 * has a point: the sums of its members' areas (under the sizing rule the
 * comparison's limits use, and half-maximum), the largest member's length
 * (major axis) and peak contrast, the area-weighted depth and position on
 * the airframe, the classes of the changes it took part in, and an event
 * when the number of its indications changed (a split or a merge), or when
 * it was not found or not compared. A post-repair baseline opens a new era:
 * the tracks of the one before end there, marked as closed by it.
 *
 * Growth (pl_growth_fit()). Area against flight cycles, against flight
 * hours and against days since the track's first point, by weighted least
 * squares of the straight line area = a + b x, each point weighted by
 * 1 / sigma^2, sigma the measurement's area repeatability stated by the
 * criteria rule. The slope's standard uncertainty is the larger of two:
 * from the repeatability alone (the unscaled covariance (A^T W A)^-1), and
 * from the scatter about the line (that covariance times chi^2 / (n - 2),
 * with three points or more). A track is "growing" when b > k u(b), k =
 * PL_TRACK_COVERAGE_FACTOR (a coverage factor of 2, about 95 %: JCGM
 * 100:2008, section 6.3); otherwise "not growing" and no forecast is made.
 * The forecast is the x at which the line reaches the track's limit area L,
 * x* = (L - a) / b, with the interval of the x where the line's band
 * a + b x +- k u(a + b x) reaches L (Fieller's theorem: E. C. Fieller
 * (1954), "Some problems in interval estimation", J. R. Stat. Soc. B 16).
 * L is the reference area plus the area growth allowed
 * (pl_change_area_limit() with the rule's limits as the latest comparison
 * recorded them): the reference is the track's area at the baseline, or,
 * for a track first found later, its area when first found (growth since
 * it was found). A track whose latest area is at L or beyond has "reached"
 * the limit. The model assumes linear growth between inspections; a
 * forecast supports, and does not replace, the engineer's judgement and the
 * design holder's data. A track that reached its limit keeps the line's
 * crossing (when it grows beyond k u(b)): when, by the line, it got there.
 *
 * Life. pl_tracks_load() allocates a pl_site_tracks that owns everything
 * in it; pl_site_tracks_free() releases it.
 */
#ifndef PLYLEDGER_TRACK_H
#define PLYLEDGER_TRACK_H

#include "plyledger/common.h"
#include "plyledger/disposition.h"
#include "plyledger/map.h"
#include "plyledger/store.h"

#ifdef __cplusplus
extern "C" {
#endif

/** Pixels by which a bounding box is widened to link indications (rule 3). */
#define PL_TRACK_LINK_MARGIN_PX 2.0
/** The coverage factor k of the growth test and the forecast interval. */
#define PL_TRACK_COVERAGE_FACTOR 2.0

/** What the line of one growth fit says. */
typedef enum pl_growth_state {
    PL_GROWTH_TOO_FEW = 0,     /**< fewer than two points with this x known */
    PL_GROWTH_NOT_GROWING = 1, /**< slope within k u(slope) of zero, or falling */
    PL_GROWTH_GROWING = 2,     /**< slope beyond k u(slope): a forecast is made */
    PL_GROWTH_REACHED = 3,     /**< the latest area is at the limit or beyond (the
                                    crossing is kept when the slope is significant) */
} pl_growth_state;

/** A weighted straight-line fit of area against x, and its forecast. */
typedef struct pl_growth_fit {
    pl_growth_state state;
    size_t n;                    /**< points used */
    double intercept, slope;     /**< area = intercept + slope x (mm^2, mm^2 per x) */
    double var_intercept, var_slope, covariance; /**< the covariance used */
    double u_slope_repeatability;/**< from the repeatability alone */
    double u_slope_scatter;      /**< from the scatter (NaN under three points) */
    double u_slope;              /**< the larger: the slope's standard uncertainty */
    double chi2;                 /**< sum of squared weighted residuals */
    double limit;                /**< the area L projected onto (NaN: none) */
    double crossing;             /**< x at which the line reaches L (NaN: none) */
    double crossing_low, crossing_high; /**< its interval (NaN: unbounded) */
} pl_growth_fit;

/**
 * Fit area `y` against `x` (n points; a point with a non-finite x, y or
 * sigma, or sigma <= 0, is left out) by weighted least squares with
 * weights 1/sigma^2, and project onto `limit` (NaN: no forecast) as the
 * introduction says; `k` is the coverage factor (> 0). `last_area` is the
 * track's latest area (for PL_GROWTH_REACHED; NaN: not judged).
 * @return PL_OK (out->state says what the fit could do), PL_EINVAL (k not
 *         positive and finite).
 */
PL_EXPORT int pl_growth_fit_line(pl_growth_fit *out, const double *x, const double *y,
                                 const double *sigma, size_t n, double limit, double k,
                                 double last_area, pl_err *err);

/** The name of a growth state: "too few points", "not growing", "growing",
 * "limit reached". */
PL_EXPORT const char *pl_growth_state_name(pl_growth_state state);

/** One inspection of the site, as tracks see it. */
typedef struct pl_track_inspection {
    pl_id key;
    char date[PL_DATE_SIZE];
    char kind[PL_WORD_SIZE];
    char task_ref[PL_NAME_SIZE];
    double hours;                /**< NaN unknown */
    int64_t cycles;              /**< -1 unknown */
    int simulated;
    pl_id era;                   /**< the baseline inspection its comparison used (its
                                      own key for a baseline), 0: not compared */
    pl_id comparison_id;         /**< the comparison used, 0: none */
    char comparison_status[PL_TEXT_SIZE]; /**< "done", "not done: why", "none recorded",
                                      "baseline" */
} pl_track_inspection;

/** A track at one inspection. */
typedef struct pl_track_point {
    size_t inspection;           /**< index into pl_site_tracks.inspections */
    pl_id comparison_id;         /**< where the measures come from */
    char changes[PL_TEXT_SIZE];  /**< the changes of that comparison it took part in,
                                      as numbers "1,3" ("" for the baseline's side) */
    char classes[PL_TEXT_SIZE];  /**< their classes, "stable", "grown,changed-region" */
    int seen;                    /**< 1: found there; 0: not found (area 0) or not
                                      compared (areas NaN) */
    int exceeds;                 /**< a change beyond its limits */
    size_t nindications;         /**< members at this inspection */
    double area_mm2;             /**< under the comparison's sizing rule */
    double area_halfmax_mm2;
    double length_mm;            /**< the largest member's major axis */
    double contrast;             /**< the largest member's peak contrast */
    double depth_mm;             /**< area-weighted; NaN unknown */
    double part_x, part_y, part_z; /**< area-weighted centroid on the airframe */
    double centroid_col, centroid_row; /**< on the era's baseline grid */
    char event[PL_TEXT_SIZE];    /**< "split: 1 into 2", "merged: 2 into 1", "not found",
                                      "not compared", "first found", "" */
} pl_track_point;

/** One track. */
typedef struct pl_track {
    unsigned number;             /**< 1.. in the order of the listing */
    pl_id era;                   /**< its baseline inspection */
    pl_id closed_by;             /**< the post-repair baseline that ended it, or 0 */
    int reportable;              /**< a change of it reached the minimum reportable size */
    int at_baseline;             /**< 1: present at the baseline */
    size_t npoints;
    pl_track_point *points;      /**< oldest first, from its first point */
    double reference_area_mm2;   /**< its area at the baseline, or when first found */
    double limit_area_mm2;       /**< L (NaN: the rule gives no area limit) */
    char limit_basis[PL_TEXT_SIZE]; /**< how L was reached, in words */
    pl_growth_fit by_cycles, by_hours, by_days;
    char forecast_date[PL_DATE_SIZE];       /**< by_days' crossing as a date, or "" */
    char forecast_date_low[PL_DATE_SIZE];   /**< its interval, or "" (unbounded) */
    char forecast_date_high[PL_DATE_SIZE];
    size_t ndispositions;
    pl_id *dispositions;         /**< ids of the site's dispositions covering its changes */
} pl_track;

/** Options; initialise with PL_TRACK_OPTIONS_INIT. */
typedef struct pl_track_options {
    unsigned version;            /**< PL_TRACK_OPTIONS_VERSION */
    const char *quantity;        /**< NULL: the quantity of the site's latest comparison */
    const char *label;           /**< NULL: with `quantity` NULL, that comparison's label;
                                      else any label of the quantity */
} pl_track_options;

#define PL_TRACK_OPTIONS_VERSION 1
#define PL_TRACK_OPTIONS_INIT { PL_TRACK_OPTIONS_VERSION, NULL, NULL }

/** Every track of a site. */
typedef struct pl_site_tracks {
    pl_site site;
    char quantity[PL_QUANTITY_SIZE];
    char label[PL_NAME_SIZE];
    char unit[PL_UNIT_SIZE];
    char sizing[PL_WORD_SIZE];   /**< the sizing rule of area_mm2 */
    char criteria_name[PL_NAME_SIZE];    /**< the latest comparison's criteria */
    char criteria_revision[PL_WORD_SIZE];
    char criteria_rule[PL_NAME_SIZE];
    int example_values;          /**< 1: the criteria are example values */
    double repeatability_area_mm2;
    size_t ninspections;
    pl_track_inspection *inspections; /**< oldest first */
    size_t ntracks;
    pl_track *tracks;
    size_t ndispositions;
    pl_disposition *dispositions;     /**< of the site, as recorded */
} pl_site_tracks;

/**
 * The tracks of site `code` on airframe `serial` (see the introduction).
 * A site without a done comparison of the quantity has inspections and no
 * tracks.
 * @param[out] out  free with pl_site_tracks_free()
 * @return PL_OK, PL_ENOTFOUND (no such airframe or site), PL_EINVAL
 *         (options), PL_EFORMAT (a comparison whose recorded result cannot
 *         be read), PL_EDB, PL_ENOMEM.
 */
PL_EXPORT int pl_tracks_load(pl_site_tracks **out, pl_store *store, const char *serial,
                             const char *code, const pl_track_options *opts, pl_err *err);

/** Release tracks; NULL is accepted. */
PL_EXPORT void pl_site_tracks_free(pl_site_tracks *tracks);

/**
 * The caution and model statement every output of a forecast carries (one
 * paragraph, static storage).
 */
PL_EXPORT const char *pl_track_assumptions(void);

/**
 * Tracks as text: per track its points (date, hours, cycles, area, length,
 * contrast, depth, classes, event), its growth against each x and the
 * forecast, its dispositions; the criteria with their example marking, the
 * assumptions and the caution.
 * @param[out] out  free with free()
 */
PL_EXPORT int pl_site_tracks_text(char **out, const pl_site_tracks *tracks, pl_err *err);

/**
 * Tracks as JSON: "caution", "assumptions", "airframe", "site", "quantity",
 * "label", "unit", "sizing", "criteria" {name, revision, rule,
 * example_values, marking, repeatability_area_mm2}, "inspections" [...],
 * "tracks" [ { number, era, closed_by, reportable, at_baseline,
 * reference_area_mm2, limit_area_mm2, limit_basis, points [...],
 * growth { cycles, hours, days: { state, n, intercept, slope, u_slope,
 * u_slope_repeatability, u_slope_scatter, chi2, limit, crossing,
 * crossing_low, crossing_high } }, forecast_date, forecast_date_low,
 * forecast_date_high, dispositions [ids] } ].
 * @param[out] out  free with free()
 */
PL_EXPORT int pl_site_tracks_json(char **out, const pl_site_tracks *tracks, pl_err *err);

/** Which table pl_site_tracks_csv() writes. */
typedef enum pl_track_table {
    PL_TRACK_TABLE_POINTS = 0,   /**< one row per track and inspection */
    PL_TRACK_TABLE_GROWTH = 1,   /**< one row per track: growth and forecast */
} pl_track_table;

/**
 * A table of tracks as CSV (RFC 4180, written with libcsv; a header row
 * naming the columns, README.md "Tables" documents them; numbers in full
 * precision, empty where unknown).
 * @param[out] out  free with free()
 * @return PL_OK, PL_EINVAL (table), PL_ENOMEM.
 */
PL_EXPORT int pl_site_tracks_csv(char **out, const pl_site_tracks *tracks, pl_track_table table,
                                 pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
