/*
 * sim_int.h - the simulator's scene and model, visible to the library and
 * its tests; never installed.
 *
 * Units: the scene keeps the file's units (mm, degrees, kelvin, SI for
 * material properties); the model works in SI (m, s, J, K, W).
 */
#ifndef PLYLEDGER_SIM_INT_H
#define PLYLEDGER_SIM_INT_H

#include "plyledger/sim.h"

#include <stddef.h>
#include <stdint.h>

#define PL_SIM__LABEL_SIZE 64

/* Outline shapes of the scene file. */
enum {
    PL_SIM__CIRCLE = 0,
    PL_SIM__ELLIPSE = 1,
    PL_SIM__RECTANGLE = 2,
    PL_SIM__POLYGON = 3,
};

/* A closed outline in the nominal site frame (mm). Circles use `a` as the
 * diameter; ellipses and rectangles use `a`, `b` as full lengths along
 * their own axes, the first at `angle_deg` from u toward v. Rectangles and
 * polygons also carry their corners in `pts` (x, y pairs). */
typedef struct pl_sim__outline {
    int shape;
    double cx, cy;
    double a, b;
    double angle_deg;
    double *pts;
    size_t npts;
    double bbox[4]; /* xmin, ymin, xmax, ymax */
} pl_sim__outline;

/* Defect kinds. */
enum {
    PL_SIM__DELAMINATION = 0,
    PL_SIM__DISBOND = 1,
    PL_SIM__IMPACT = 2,
    PL_SIM__POROSITY = 3,
};

typedef struct pl_sim__defect {
    int kind;
    char label[PL_SIM__LABEL_SIZE];
    pl_sim__outline outline;   /* impact: the widest circle of the stack */
    double depth_mm;           /* delamination, disbond; impact and porosity: top */
    double bottom_depth_mm;    /* impact, porosity */
    double resistance_m2k_w;   /* delamination, disbond, impact */
    double top_diameter_mm;    /* impact */
    double bottom_diameter_mm; /* impact */
    unsigned layers;           /* impact: delaminations in the stack */
    double conductivity_factor;/* porosity */
} pl_sim__defect;

typedef struct pl_sim__material {
    double density;            /* kg/m^3 */
    double specific_heat;      /* J/kg/K */
    double k[3];               /* W/m/K along fibres, across fibres, through */
} pl_sim__material;

/* Substructure kinds. */
enum {
    PL_SIM__FLANGE = 0,
    PL_SIM__PLY_DROP = 1,
};

typedef struct pl_sim__sub {
    int kind;
    char label[PL_SIM__LABEL_SIZE];
    pl_sim__outline outline;
    double thickness_mm;       /* flange: its thickness; ply drop: the change */
    double bond_resistance_m2k_w;
    pl_sim__material material; /* flange */
} pl_sim__sub;

/* Camera faces. */
enum { PL_SIM__FRONT = 0, PL_SIM__REAR = 1 };

struct pl_sim_scene {
    char name[PL_SIM__LABEL_SIZE];
    uint64_t seed;

    pl_sim__material laminate;
    double thickness_mm;
    double fibre_angle_deg;

    double energy_j_m2;
    double nonuniformity;
    int has_spot;
    double spot_x, spot_y, spot_sigma_mm;

    double ambient_k;
    double front_h;            /* W/m^2/K, convection only */
    double emissivity;
    double back_h;

    uint32_t width, height;
    double pitch_u, pitch_v;   /* mm */
    double frame_rate_hz;
    uint32_t frame_count;
    uint32_t preflash_frames;
    double flash_time_s;
    int face;
    double netd_k;
    double fixed_pattern_k;
    double dead_fraction;
    double dead_k;
    pl_seq_storage storage;
    double gain_k, offset_k;
    uint16_t saturation_count;

    double shift_u, shift_v;   /* mm */
    double rotation_deg;

    double grid_pitch_mm;      /* 0: the smaller camera pitch */
    unsigned layers;           /* 0: automatic */
    double margin_mm;          /* < 0: automatic */
    double steps_per_decade;

    pl_sim__defect *defects;
    size_t ndefects;
    pl_sim__sub *subs;
    size_t nsubs;

    char *acquisition_json;    /* the scene's "acquisition" object, or NULL */
    unsigned threads;          /* 0: automatic */
};

/* The discretised part: a grid aligned with the fibres (x along, y across,
 * z down from the heated face), cell index (k * ny + iy) * nx + ix. */
typedef struct pl_sim__model {
    size_t nx, ny, nz, ncol, ncell;
    double h;                  /* lateral cell size, m */
    double x0, y0;             /* fibre-frame position of cell (0,0), mm */
    double cphi, sphi;         /* fibre angle: site = R(phi) * fibre frame */
    double *zf;                /* nz + 1 face depths, m */
    double *cap;               /* heat capacity per cell, J/K (1 in void cells) */
    double *gx, *gy, *gz;      /* conductance to the +x, +y, +z neighbour, W/K */
    double *gl;                /* conductance to ambient (surface losses), W/K */
    double *T;                 /* temperature rise above ambient, K */
    double *D;                 /* the step's increment (scratch) */
    size_t *rear;              /* per column: the cell the rear face shows */
    double absorbed_j;         /* energy put in by the flash, J */
    double t0;                 /* time of the initial state after the flash, s */
} pl_sim__model;

/* Build the model of `scene` and set its state at time model->t0 (the
 * instantaneous plane source of Carslaw & Jaeger, integrated over cells). */
int pl_sim__model_new(pl_sim__model **out, const pl_sim_scene *scene, pl_err *err);
void pl_sim__model_free(pl_sim__model *m);

/* Sum of heat capacity times temperature rise over every cell, J. */
double pl_sim__model_energy(const pl_sim__model *m);

/* Called after the initial state and after every internal step, with the
 * step's end time after the flash. Return non-zero to stop (the run then
 * returns PL_ECANCELED). */
typedef int (*pl_sim__step_fn)(void *userdata, const pl_sim__model *m, double t);

/* pl_sim_run_frames() with a hook on the internal steps. */
int pl_sim__run(const pl_sim_scene *scene, pl_sim_frame_fn frame, void *frame_ud,
                pl_sim__step_fn step, void *step_ud, pl_progress_fn progress, void *progress_ud,
                pl_err *err);

/* Exact area of an outline, mm^2. */
double pl_sim__outline_area(const pl_sim__outline *o);

/* Whether site point (x, y) mm lies inside the outline. */
int pl_sim__outline_contains(const pl_sim__outline *o, double x, double y);

/* Where the camera, placed with the scene's placement error, sees site
 * point (x, y) mm: continuous pixel coordinates (pixel centres are whole). */
void pl_sim__site_to_pixel(const pl_sim_scene *scene, double x, double y, double *col,
                           double *row);

/* The inverse: the site point (mm) under camera pixel (col, row). */
void pl_sim__pixel_to_site(const pl_sim_scene *scene, double col, double row, double *x,
                           double *y);

#endif
