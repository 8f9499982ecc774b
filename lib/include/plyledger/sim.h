/*
 * plyledger/sim.h - a physical flash-thermography simulator: the sample
 * fleet's sequences and the tests' known answers.
 *
 * A scene describes one inspection site: a laminate with its defects and
 * the substructure behind it, the flash, the surface losses and the
 * camera. pl_sim_scene_load() reads it from a JSON file (keys below);
 * pl_sim_run() computes the heat flow after the flash and writes the
 * camera's sequence (plyledger/seq.h) and a ground-truth JSON file;
 * pl_sim_run_frames() hands each frame to a callback instead.
 *
 * Physics. The laminate is an orthotropic solid (conductivity along the
 * fibres, across them in the plane, and through the thickness). A flash
 * deposits its energy at the front face instantaneously. The heat equation
 * is discretised by finite volumes on a grid aligned with the fibres and
 * refined toward the heated face and every interface, and advanced by the
 * Douglas alternating-direction implicit scheme (Douglas 1962, "Alternating
 * direction methods for three space variables"; theta = 1/2 after two
 * damping steps with theta = 1), which is unconditionally stable, on time
 * steps growing geometrically from just after the flash; frames are
 * interpolated between steps in log temperature against log time.
 * Delaminations and disbonds are interface thermal resistances on a plane;
 * impact damage is a stack of them widening with depth; porosity lowers the
 * through-thickness conductivity in a region and depth range; a flange is
 * material bonded behind the skin, a ply drop a change of thickness.
 * Surface losses are linear: front convection plus linearised radiation
 * 4 e sigma T_ambient^3, and optional back convection.
 *
 * Geometry. The site frame is the nominal camera's: pixel (col i, row j)
 * of a camera placed without error looks at (i * pitch_u, j * pitch_v) mm.
 * Every position in a scene is in this frame. A placement error moves the
 * real field of view: the real pixel (i, j) looks at
 *
 *     c + R(rotation) ((i pitch_u, j pitch_v) - c) + shift
 *
 * where c is the centre of the field of view and R turns from u toward v.
 * The part is simulated on a grid covering that field of view with a
 * margin, and each pixel samples it by bilinear interpolation.
 *
 * Scene file (JSON; every key is plyledger's own; unknown keys are
 * refused; units are in the names):
 *
 *   {
 *     "format": "plyledger-scene-1",        optional; checked when present
 *     "name": "site-12",                    optional, copied to the truth
 *     "seed": 1,                            noise, dead pixels, flash pattern
 *     "laminate": {
 *       "thickness_mm": 4.0,
 *       "density_kg_m3": 1560, "specific_heat_j_kgk": 1200,
 *       "conductivity_along_w_mk": 3.5,     in the plane, along the fibres
 *       "conductivity_across_w_mk": 0.7,    in the plane, across them
 *       "conductivity_through_w_mk": 0.6,   through the thickness
 *       "fibre_angle_deg": 0                from u toward v (default 0)
 *     },
 *     "flash": {
 *       "energy_j_m2": 8000,                absorbed energy per area
 *       "nonuniformity": 0.05,              amplitude fraction of a smooth
 *                                           low-order cosine field drawn
 *                                           from the seed, [0, 0.9] (default 0)
 *       "spot": { "centre_mm": [x, y],      optional: a Gaussian spot of peak
 *                 "sigma_mm": 1.0 }         energy_j_m2 instead of a flood
 *     },
 *     "surface": {                          optional; default no losses
 *       "ambient_k": 293.15, "front_h_w_m2k": 0, "emissivity": 0,
 *       "back_h_w_m2k": 0                   0: adiabatic back face
 *     },
 *     "camera": {
 *       "width": 96, "height": 72,          pixels
 *       "pitch_mm": 1.0  or  [pu, pv],      footprint on the part (default 1)
 *       "frame_rate_hz": 30, "frame_count": 240,
 *       "preflash_frames": 5,               >= 1 (default 5)
 *       "flash_time_s": 0.15,               default: half a frame after the
 *                                           last pre-flash frame
 *       "face": "front",                    or "rear" (transmission)
 *       "netd_k": 0.02,                     Gaussian noise per frame (default 0)
 *       "fixed_pattern_k": 0.0,             Gaussian offset per pixel (default 0)
 *       "dead_pixel_fraction": 0.0,         pixels stuck at dead_pixel_k
 *       "dead_pixel_k": 273.15,             default offset_k (count 0)
 *       "storage": "float32",               or "uint16", "png16" (counts)
 *       "gain_k": 0.001, "offset_k": 273.15,   counts: K = offset + gain * count
 *       "saturation_count": 65535
 *     },
 *     "placement_error": { "shift_mm": [0, 0], "rotation_deg": 0 },   optional
 *     "grid": {                             optional numerics
 *       "pitch_mm": 1.0,                    default the smaller camera pitch
 *       "layers": 24,                       default automatic; at least one per
 *                                           interval between interfaces
 *       "margin_mm": 5,                     default from the lateral diffusion
 *                                           length at the last frame
 *       "steps_per_decade": 20              time steps per decade (default 20)
 *     },
 *     "defects": [
 *       { "kind": "delamination",           or "disbond" (the same physics)
 *         "label": "D1",                    optional
 *         "depth_mm": 1.0,
 *         "resistance_m2k_w": 9.6e-4,       default: a 25 um air gap
 *         "outline": OUTLINE },
 *       { "kind": "impact", "centre_mm": [x, y],
 *         "top_depth_mm": 0.5, "bottom_depth_mm": 3.0,
 *         "top_diameter_mm": 6, "bottom_diameter_mm": 20,
 *         "layers": 5,                      delaminations in the stack (default 5)
 *         "resistance_m2k_w": 9.6e-4 },
 *       { "kind": "porosity", "outline": OUTLINE,
 *         "top_depth_mm": 0.5, "bottom_depth_mm": 2.0,
 *         "conductivity_factor": 0.6 }      through-thickness, (0, 1]
 *     ],
 *     "substructure": [
 *       { "kind": "flange", "outline": OUTLINE, "thickness_mm": 3.0,
 *         "bond_resistance_m2k_w": 0,       the adhesive layer (default 0)
 *         "material": { density_kg_m3, specific_heat_j_kgk,
 *                       conductivity_w_mk or the three conductivity keys }
 *                                           default: the laminate's },
 *       { "kind": "ply_drop", "outline": OUTLINE,
 *         "thickness_change_mm": -0.5 }     the laminate's thickness changes
 *                                           by this much inside the outline
 *     ],
 *     "acquisition": { ... }                free object for the manifest
 *   }
 *
 *   OUTLINE is one of
 *     { "shape": "circle", "centre_mm": [x, y], "diameter_mm": d }
 *     { "shape": "ellipse", "centre_mm": [x, y], "axes_mm": [a, b],
 *       "angle_deg": 0 }                    full axis lengths; the first axis
 *                                           at angle_deg from u toward v
 *     { "shape": "rectangle", "centre_mm": [x, y], "size_mm": [a, b],
 *       "angle_deg": 0 }
 *     { "shape": "polygon", "points_mm": [[x, y], ...] }   3 or more, simple
 *
 * Depths are measured from the heated face. Substructure lies behind the
 * laminate (depths from thickness_mm on); where items overlap in a cell the
 * later one wins.
 *
 * Ground truth (pl_sim_truth_json()): "format": "plyledger-truth-1", the
 * camera, the placement error and the site-to-pixel transform, the
 * laminate's diffusivities, and for every defect and substructure item its
 * kind, label, depth(s), outline as in the scene, the outline as points in
 * mm and in camera pixels, its centre in both, and its exact area in mm^2
 * (and in pixels); impact damage also lists each delamination of the
 * stack; finally the dead pixels.
 *
 * Lifetime: pl_sim_scene_load() / pl_sim_scene_parse() allocate a scene;
 * pl_sim_scene_free() releases it. A scene is not changed by running it
 * and may be run several times, one run at a time.
 */
#ifndef PLYLEDGER_SIM_H
#define PLYLEDGER_SIM_H

#include "plyledger/common.h"
#include "plyledger/seq.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef struct pl_sim_scene pl_sim_scene;

/**
 * Read a scene file.
 * @param[out] out  free with pl_sim_scene_free()
 * @param path      the JSON scene file
 * @return PL_OK, PL_EIO (cannot read), PL_EFORMAT (not JSON; a key unknown,
 *         missing or of the wrong type), PL_EINVAL (a value out of its
 *         range, a defect outside the laminate's depth), PL_ENOMEM.
 *         Messages name the file, the object and the key.
 */
PL_EXPORT int pl_sim_scene_load(pl_sim_scene **out, const char *path, pl_err *err);

/**
 * Build a scene from JSON text (the format of pl_sim_scene_load()).
 * @param[out] out  free with pl_sim_scene_free()
 * @param json      NUL-terminated text
 * @param name      what messages call the text (e.g. a file name)
 * @return as pl_sim_scene_load(), without PL_EIO.
 */
PL_EXPORT int pl_sim_scene_parse(pl_sim_scene **out, const char *json, const char *name,
                                 pl_err *err);

/** Release a scene; NULL is accepted. */
PL_EXPORT void pl_sim_scene_free(pl_sim_scene *scene);

/** What a scene will produce, from pl_sim_scene_info(). */
typedef struct pl_sim_info {
    uint32_t width, height;         /**< camera pixels */
    uint32_t frame_count;           /**< frames in the sequence */
    uint32_t preflash_frames;       /**< frames before the flash */
    double frame_rate_hz;           /**< uniform frames from t = 0 */
    double flash_time_s;            /**< on the frames' clock */
    double pitch_u, pitch_v;        /**< pixel footprint, mm */
    double thickness_mm;            /**< the laminate's nominal thickness */
    double diffusivity_mm2_s[3];    /**< along fibres, across, through thickness */
    double ambient_k;               /**< temperature before the flash */
    size_t defect_count;            /**< entries of "defects" */
} pl_sim_info;

/** Fill [out] info from a scene. */
PL_EXPORT void pl_sim_scene_info(const pl_sim_scene *scene, pl_sim_info *info);

/**
 * Worker threads for runs of this scene: 0 (the default) uses one per
 * online processor, at most 256. The output does not depend on it.
 */
PL_EXPORT void pl_sim_scene_set_threads(pl_sim_scene *scene, unsigned threads);

/**
 * Receives one camera frame: `index` from 0, `time_s` relative to the
 * flash (negative before it), `kelvin` width * height temperatures,
 * row-major, valid during the call. Return PL_OK to go on; any other value
 * stops the run, which returns it (PL_ECANCELED for a positive value).
 * Called from the thread that started the run, in frame order.
 */
typedef int (*pl_sim_frame_fn)(void *userdata, uint32_t index, double time_s,
                               const float *kelvin);

/**
 * Simulate a scene and hand every frame, noise included, to `frame`.
 * @param frame        receives the frames
 * @param progress     may be NULL; called as the simulation advances
 * @return PL_OK, PL_ENOMEM, PL_EINVAL (a grid too large to hold),
 *         PL_ECANCELED (progress asked to stop), or the callback's code.
 */
PL_EXPORT int pl_sim_run_frames(const pl_sim_scene *scene, pl_sim_frame_fn frame,
                                void *frame_userdata, pl_progress_fn progress,
                                void *progress_userdata, pl_err *err);

/**
 * Simulate a scene and write its sequence (manifest at `manifest_path`,
 * data beside it, in the scene's camera storage) and, when `truth_path` is
 * not NULL, its ground truth. Both are written through temporary files
 * and renamed into place, the ground truth after the sequence: a failed
 * run leaves neither behind, and earlier files of the same names as they
 * were.
 * @return as pl_sim_run_frames(), and PL_EIO (a file cannot be written).
 */
PL_EXPORT int pl_sim_run(const pl_sim_scene *scene, const char *manifest_path,
                         const char *truth_path, pl_progress_fn progress, void *userdata,
                         pl_err *err);

/**
 * The scene's ground truth as JSON text (see the introduction).
 * @param[out] out  malloc'd, NUL-terminated; the caller frees with free()
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_sim_truth_json(char **out, const pl_sim_scene *scene, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
