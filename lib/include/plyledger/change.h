/*
 * plyledger/change.h - what changed at one site between its baseline and a
 * reinspection: indications matched, classified against written limits,
 * and changed regions found directly in the difference of the two maps.
 *
 * Inputs (pl_change_input). One channel of the baseline map and its
 * detection (plyledger/detect.h); the same channel of the current map
 * already carried onto the baseline grid through the registration
 * (pl_register_maps()' aligned map, so that both share size, pitch and
 * placement) and its detection on that grid; optionally a coverage mask
 * (1: the aligned current map covers the baseline pixel); the
 * registration's standard uncertainty in pixels; and the limits
 * (pl_change_limits), plain numbers that a criteria rule fills in.
 * pl_change_compare() hands out a pl_comparison, which owns everything in
 * it and goes back with pl_comparison_free(). pl_change_site() does the
 * whole of one site (register, detect both, compare) for callers that
 * start from the two recorded maps; unless the detection options give a
 * noise, the current map's is estimated on its own grid (resampling onto
 * the baseline's smooths the noise, which the high-pass estimate would
 * then find too small: on the sample fleet's maps, 36 to 72 % of it) and
 * its detection on the baseline grid uses that.
 *
 * Coverage. A baseline pixel holding data is compared when the aligned
 * current map holds data there too (and the mask, when given, says it is
 * covered); the others are "not compared", counted in pixels, mm^2 and as
 * a fraction of the baseline's pixels with data. A baseline indication
 * with half or more of its pixels not compared is not judged: it gets
 * kind PL_CHANGE_NOT_COMPARED, never "vanished".
 *
 * Matching. Indications are nodes of a graph with an edge between a
 * baseline indication i and a current indication j when
 *   1. their labelled pixels overlap (any common pixel), or, for an
 *      indication that overlaps nothing,
 *   2. their centroids lie within the tolerance
 *          tol_px = 3 u + 1
 *      of each other, u the registration's standard uncertainty in pixels:
 *      3 u covers the misregistration with a coverage factor k = 3 (JCGM
 *      100:2008, "Guide to the expression of uncertainty in measurement",
 *      section 6.3), and the pixel is the quantisation of a labelled
 *      region's edge, which moves a small region's centroid by up to half
 *      a pixel in each map. Each unmatched indication takes its nearest
 *      partner within the tolerance (a mutual choice, so no chain forms).
 * The connected components of that graph are the groups: one baseline
 * and one current indication; a split (one baseline, several current);
 * a merge (several baseline, one current); or several of each. They are
 * kept as such, never forced one-to-one: a group's sizes are the sums of
 * its members' areas and its contrast the largest of its members' peaks.
 *
 * A group with indications in one map only is then looked for in the other
 * map at the same pixels, with the first map's background and thresholds
 * (the other map's signal there is s - (d - level): s the members' own
 * detection signal, d the difference below, level its median around the
 * group). When, summed over the members' pixels, less than half of the
 * departure came or went, the other map shows the same feature and only
 * its own detection left it out (its background, taken along lines that
 * the edge of the map or of the coverage cut short, rose with it): the
 * group is matched by signal (PL_MATCH_SIGNAL), the other side's sizes
 * measured from s' and d (threshold: the members' pixels less those that
 * changed, s' short of the low threshold with d - level beyond the low
 * multiple of sqrt(sigma_b^2 + sigma_c^2); half-maximum: the members'
 * pixels at half of the peak of s' or more), and it is classified as
 * below, never new or vanished.
 *
 * Classification of a group (pl_change_kind):
 *   new        current indications and no baseline one;
 *   vanished   baseline indications (compared) and no current one;
 *   grown      both, and the area or the contrast grew beyond its limit;
 *   stable     both, within the limits (shrinking included; the deltas say
 *              by how much).
 * Changed regions (PL_CHANGE_REGION). The difference map
 *     d = polarity x (current - baseline)
 * on the compared pixels (the channel's polarity, so that d > 0 where the
 * current map looks more like a defect; `difference`) is searched after
 * each map's own sound background is taken off: the search runs on
 * s_c - s_b, the two detections' signals (polarity x (value - b)), so that
 * the change of the flash's pattern or shading between two acquisitions
 * does not count and a large indication's edge does not pull a background
 * of the difference. It goes through pl_detect() as a free quantity of
 * stated polarity "rises" with a zero background and the baseline
 * detection's thresholds (multiples of the noise) and minimum area. The
 * noise is the difference's own (the high-pass estimate); where that is
 * nil or cannot be made (a map against itself), sqrt(sigma_b^2 +
 * sigma_c^2), the noise of a difference of two independent maps with the
 * detections' noises. The parts of its regions outside every indication
 * of both maps, 8-connected and at least the minimum area, are entries of
 * their own when the maps' values changed there too (summed over the
 * region, d less its median around the region at least half of s_c -
 * s_b: where only the two backgrounds parted, it is not a change): a
 * growth ring at a disbond's edge that the current map's
 * detection left out (then `touches` names the change whose indications
 * it borders most), or a new indication below the single-map threshold.
 *
 * Limits and margins. Each change records its measured deltas (area in mm^2
 * under both sizing rules, in percent of the baseline's, and the peak
 * contrast in the channel's units, positive when the indication looks more
 * like a defect), the limit applied, the margin = limit - measured, and
 * whether it exceeds. The sizing rule of the limits (`sizing`) decides.
 *   PL_LIMITS_GROWTH: area limit = max(area repeatability,
 *       min(area_growth_mm2, area_growth_percent / 100 x baseline area))
 *       (either growth limit alone when the other is NaN: the tighter of
 *       the two written limits, never below what the measurement can
 *       repeat); contrast limit = max(contrast repeatability,
 *       contrast_growth).
 *   PL_LIMITS_NO_GROWTH: any growth beyond the stated repeatability is a
 *       finding (the no-growth basis of composite structure: FAA AC
 *       20-107B, EASA AMC 20-29; MIL-HDBK-17-3F's "no-growth approach"):
 *       area limit = area repeatability, contrast limit = contrast
 *       repeatability.
 * Boundary: growth exactly at its limit is within it (margin 0, not
 * exceeded); only growth beyond it exceeds (margin < 0). A new indication
 * or a changed region not touching any indication is measured against
 * new_reportable_mm2 and exceeds from that size on (at the size itself:
 * margin 0 and exceeded, as "the size at which a new indication is
 * reportable" says). A changed region bordering a change is measured as
 * growth of that change's baseline area. A vanished indication exceeds
 * when `vanished` is PL_VANISHED_FINDING (the usual reading: a vanished
 * disbond is more often a registration, coverage or procedure fault than
 * a healed part), never under PL_VANISHED_NOTE. Groups and regions whose
 * every area (under `sizing`) is below min_reportable_mm2 are listed with
 * reportable 0 and never exceed.
 *
 * The comparison supports qualified NDT personnel; the design holder's
 * approved data and the inspection procedure govern any disposition.
 *
 * Work is single-threaded.
 */
#ifndef PLYLEDGER_CHANGE_H
#define PLYLEDGER_CHANGE_H

#include "plyledger/common.h"
#include "plyledger/detect.h"
#include "plyledger/map.h"
#include "plyledger/register.h"

#include <math.h>

#ifdef __cplusplus
extern "C" {
#endif

/** What kind of limits a rule sets. */
typedef enum pl_limits_kind {
    PL_LIMITS_GROWTH = 0,    /**< written area and contrast growth limits */
    PL_LIMITS_NO_GROWTH = 1, /**< any growth beyond the repeatability is a finding */
} pl_limits_kind;

/** What a vanished indication is. */
typedef enum pl_vanished_action {
    PL_VANISHED_FINDING = 0, /**< a finding: exceeds (the default) */
    PL_VANISHED_NOTE = 1,    /**< listed, never exceeds */
} pl_vanished_action;

/** The limits of one comparison: what a criteria rule says, as numbers.
 * Initialise with PL_CHANGE_LIMITS_INIT. NaN: not set (see each). */
typedef struct pl_change_limits {
    unsigned version;                /**< PL_CHANGE_LIMITS_VERSION */
    pl_limits_kind kind;             /**< default PL_LIMITS_GROWTH */
    pl_sizing sizing;                /**< the sizing rule the limits apply to */
    double area_repeatability_mm2;   /**< >= 0, required */
    double contrast_repeatability;   /**< >= 0, channel units, required */
    double min_reportable_mm2;       /**< >= 0; NaN: 0 */
    double new_reportable_mm2;       /**< >= 0; NaN: min_reportable_mm2 */
    double area_growth_mm2;          /**< >= 0; NaN: none (growth kind) */
    double area_growth_percent;      /**< >= 0; NaN: none (growth kind) */
    double contrast_growth;          /**< >= 0, channel units; NaN: none */
    pl_vanished_action vanished;     /**< default PL_VANISHED_FINDING */
} pl_change_limits;

#define PL_CHANGE_LIMITS_VERSION 1
#define PL_CHANGE_LIMITS_INIT                                                        \
    { PL_CHANGE_LIMITS_VERSION, PL_LIMITS_GROWTH, PL_SIZING_THRESHOLD, NAN, NAN, NAN, \
      NAN, NAN, NAN, NAN, PL_VANISHED_FINDING }

/** The inputs of pl_change_compare(); initialise with PL_CHANGE_INPUT_INIT. */
typedef struct pl_change_input {
    unsigned version;                 /**< PL_CHANGE_INPUT_VERSION */
    const pl_map *baseline;           /**< the baseline map (pitch known) */
    uint32_t baseline_channel;        /**< its compared channel */
    const pl_detection *baseline_detection; /**< pl_detect() of that channel */
    const pl_map *current;            /**< the current map on the baseline grid */
    uint32_t current_channel;         /**< the same quantity and unit */
    const pl_detection *current_detection;  /**< pl_detect() on that grid */
    const uint8_t *covered;           /**< may be NULL; w * h, 1: covered */
    double registration_uncertainty_px; /**< standard uncertainty u, >= 0 */
} pl_change_input;

#define PL_CHANGE_INPUT_VERSION 1
#define PL_CHANGE_INPUT_INIT { PL_CHANGE_INPUT_VERSION, NULL, 0, NULL, NULL, 0, NULL, NULL, NAN }

/** How a change's indications were matched. */
typedef enum pl_change_match {
    PL_MATCH_NONE = 0,     /**< no partner (new, vanished, region) */
    PL_MATCH_OVERLAP = 1,  /**< by overlapping pixels (at least one edge) */
    PL_MATCH_DISTANCE = 2, /**< by centroid distance alone */
    PL_MATCH_SIGNAL = 3,   /**< in one map's detection only, but the other map
                                shows the same departure at its pixels */
} pl_change_match;

/** The kind of a change. */
typedef enum pl_change_kind {
    PL_CHANGE_NEW = 0,
    PL_CHANGE_GROWN = 1,
    PL_CHANGE_STABLE = 2,
    PL_CHANGE_VANISHED = 3,
    PL_CHANGE_NOT_COMPARED = 4, /**< a baseline indication mostly outside the coverage */
    PL_CHANGE_REGION = 5,       /**< a changed region of the difference map */
} pl_change_kind;

#define PL_CHANGE_KIND_COUNT 6

/** One change: a group of matched indications, or a changed region. */
typedef struct pl_change {
    pl_change_kind kind;
    pl_change_match match;
    size_t nbaseline, ncurrent;  /**< members */
    uint32_t *baseline_labels;   /**< nbaseline labels of the baseline detection */
    uint32_t *current_labels;    /**< ncurrent labels of the current detection */
    double area_baseline_mm2[PL_SIZING_COUNT]; /**< sums of the members' areas */
    double area_current_mm2[PL_SIZING_COUNT];  /**< (for a region: its area, current) */
    double area_delta_mm2[PL_SIZING_COUNT];    /**< current - baseline */
    double area_delta_percent[PL_SIZING_COUNT]; /**< of the baseline's; NaN without one */
    double contrast_baseline;    /**< largest member peak signal, channel units */
    double contrast_current;     /**< (for a region: the peak of s_c - s_b) */
    double contrast_delta;       /**< current - baseline (NaN unless both) */
    double centroid_col, centroid_row; /**< area-weighted, current members if any */
    double distance_px;          /**< between the baseline and current centroids
                                      (NaN unless both) */
    double area_limit_mm2;       /**< limit applied to the area (NaN: none) */
    double area_measured_mm2;    /**< what it was compared with */
    double area_margin_mm2;      /**< limit - measured */
    int area_exceeds;
    double contrast_limit;       /**< limit applied to the contrast (NaN: none) */
    double contrast_margin;      /**< limit - contrast_delta */
    int contrast_exceeds;
    int reportable;              /**< 0: below min_reportable_mm2 */
    int exceeds;                 /**< a finding against the limits */
    uint64_t region_pixels;      /**< a region: its pixels */
    uint32_t region_label;       /**< a region: its value in region_labels */
    long touches;                /**< a region: the change it borders, -1 none */
} pl_change;

/** A site's comparison; owns every pointer. */
typedef struct pl_comparison {
    uint32_t width, height;
    char quantity[PL_QUANTITY_SIZE];
    char unit[PL_UNIT_SIZE];
    int polarity;
    double pitch_u, pitch_v;
    double tolerance_px;           /**< centroid matching tolerance, 3 u + 1 */
    double registration_uncertainty_px;
    pl_change_limits limits;       /**< as applied, defaults filled in */
    uint64_t pixels_compared;      /**< baseline pixels with data, covered */
    uint64_t pixels_not_compared;  /**< baseline pixels with data, not covered */
    double not_compared_mm2;
    double not_compared_fraction;  /**< of the baseline's pixels with data */
    double difference_noise;       /**< sigma of s_c - s_b, channel units (NaN:
                                        no changed regions were searched) */
    double difference_high, difference_low; /**< its thresholds */
    size_t count;                  /**< changes */
    pl_change *changes;            /**< groups first (in the order of their first
                                        baseline, then current label), then regions */
    size_t counts[PL_CHANGE_KIND_COUNT]; /**< changes of each kind */
    size_t exceeding;              /**< changes that exceed */
    float *difference;             /**< w * h: d, NaN where not compared */
    uint32_t *region_labels;       /**< w * h: 0, or k for the region with
                                        region_label k */
} pl_comparison;

/**
 * Check limits (NaN where a default or "none" is allowed).
 * @return PL_OK, PL_EINVAL (version, a negative or missing value, an
 *         unknown kind, sizing or action: the message names the field).
 */
PL_EXPORT int pl_change_limits_check(const pl_change_limits *limits, pl_err *err);

/**
 * Compare one site (see the introduction).
 * @param[out] out  free with pl_comparison_free(); NULL on failure
 * @return PL_OK; PL_EINVAL (bad limits; a NULL map or detection; channels
 *         out of range; maps of different size or pitch, or without a
 *         pitch; a detection that is not of its map's channel; quantities
 *         or units that differ; polarities that differ; an uncertainty
 *         negative or not a number); PL_ENOMEM.
 */
PL_EXPORT int pl_change_compare(pl_comparison **out, const pl_change_input *in,
                                const pl_change_limits *limits, pl_err *err);

/** Release a comparison; NULL is accepted. */
PL_EXPORT void pl_comparison_free(pl_comparison *cmp);

/**
 * The area growth an indication of baseline area `a0` (mm^2) may show
 * before it has grown under `limits`: a no-growth rule's area
 * repeatability; a growth rule's smaller of area_growth_mm2 and
 * area_growth_percent of a0 (those given), never below the repeatability;
 * NaN when the rule gives no area limit. The classification uses exactly
 * this; the growth forecast (plyledger/track.h) projects onto it.
 */
PL_EXPORT double pl_change_area_limit(const pl_change_limits *limits, double a0);

/** The name of a kind: "new", "grown", "stable", "vanished", "not-compared",
 * "changed-region"; NULL when unknown. */
PL_EXPORT const char *pl_change_kind_name(pl_change_kind kind);

/** The name of a limits kind: "growth", "no-growth"; NULL when unknown. */
PL_EXPORT const char *pl_limits_kind_name(pl_limits_kind kind);

/** Default standard uncertainty of a registration that was not refused,
 * pixels: the simulated reinspections of tests/test_register.c are
 * registered within 0.1 px and 0.05 degrees (0.05 px at 60 px from the
 * centre) and within 0.25 px at an SNR of 3; u is taken as that 0.25. */
#define PL_CHANGE_DEFAULT_REGISTRATION_UNCERTAINTY_PX 0.25

/** Options of pl_change_site(). Initialise with PL_CHANGE_SITE_OPTIONS_INIT. */
typedef struct pl_change_site_options {
    unsigned version;             /**< PL_CHANGE_SITE_OPTIONS_VERSION */
    const char *register_quantity; /**< as pl_register_maps() (NULL: its default) */
    const char *register_label;
    pl_register_options reg;      /**< registration options */
    pl_detect_options detect;     /**< detection options, both maps */
    double registration_uncertainty_px; /**< NaN: the default above */
} pl_change_site_options;

#define PL_CHANGE_SITE_OPTIONS_VERSION 1
#define PL_CHANGE_SITE_OPTIONS_INIT                                               \
    { PL_CHANGE_SITE_OPTIONS_VERSION, NULL, NULL, PL_REGISTER_OPTIONS_INIT,        \
      PL_DETECT_OPTIONS_INIT, NAN }

/**
 * The whole comparison of one site from its two maps: register `current`
 * onto `baseline` (pl_register_maps()), detect on the baseline's channel
 * `baseline_channel` and on the aligned current map's channel of the same
 * quantity and label, and compare. A refused registration is no failure:
 * [out] reg says so and why, and *out is NULL.
 * @param[out] out  free with pl_comparison_free(); NULL when refused or failed
 * @param[out] reg  the registration (may be NULL)
 * @param opts      NULL for PL_CHANGE_SITE_OPTIONS_INIT
 * @return PL_OK (check *out), PL_ENOTFOUND (no channel of that quantity and
 *         label in the current map), or as pl_register_maps(), pl_detect()
 *         and pl_change_compare().
 */
PL_EXPORT int pl_change_site(pl_comparison **out, pl_register_result *reg,
                             const pl_map *baseline, uint32_t baseline_channel,
                             const pl_map *current, const pl_change_limits *limits,
                             const pl_change_site_options *opts, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
