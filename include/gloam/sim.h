/*
 * gloam/sim.h -- physical-optics simulation of a coronagraphic pupil-tracking
 * (angular differential imaging) sequence, for tests and demonstrations.
 *
 * A telescope pupil (central obstruction, spiders) carries optical path
 * errors of three kinds: static (non-common-path), quasi-static (a few fixed
 * patterns whose weights drift smoothly over the sequence) and a fast
 * adaptive-optics residual (several independent screens averaged within each
 * exposure). The field is propagated to the focal plane with FFTs, through a
 * perfect coronagraph (on-axis coherent light removed) or a Lyot coronagraph.
 * Parallactic angles follow the hour-angle track of the target (ERFA). Off-axis
 * companions pass through the same optics as tilted plane waves. Photon and
 * read noise, pointing jitter, satellite spots, several wavelength channels and
 * a reference-star sequence are options. The run returns everything in memory;
 * writing files is the caller's business.
 */
#ifndef GLOAM_SIM_H
#define GLOAM_SIM_H

#include "gloam/core.h"
#include "gloam/inject.h"

#ifdef __cplusplus
extern "C" {
#endif

#define GL_SIM_MAX_COMPANIONS 32
#define GL_SIM_MAX_CHANNELS 64

/* Coronagraph models. */
typedef enum gl_sim_coronagraph {
    GL_SIM_CORO_NONE = 0, /* no coronagraph: the plain aberrated PSF */
    GL_SIM_CORO_PERFECT,  /* removes the projection of the pupil field onto the
                             unaberrated pupil amplitude (ideal coronagraph) */
    GL_SIM_CORO_LYOT      /* opaque focal-plane disc + undersized Lyot stop */
} gl_sim_coronagraph;

/* One companion: separation (pixels), sky position angle (degrees, north
 * through east) and contrast (companion flux / star flux); the same type the
 * injection stage plants, parsed by gl_companion_parse. */
typedef gl_companion gl_sim_companion;

/* Everything the simulation depends on. Fill with gl_sim_params_init(), then
 * change what you need. Lengths in the pupil are fractions of the diameter D;
 * optical path errors are in nm (achromatic), so the phase at wavelength
 * lambda is 2 pi OPD / lambda. */
typedef struct gl_sim_params {
    /* sequence */
    long size;          /* frame width and height, pixels (default 128) */
    long nframes;       /* number of frames (48) */
    unsigned long seed; /* random seed (1) */
    /* wavelengths and sampling */
    int nchan;                                 /* wavelength channels (1) */
    double wavelength_um[GL_SIM_MAX_CHANNELS]; /* (1.65 um) */
    double sampling;                           /* pixels per lambda/D at wavelength_um[0] (4.0) */
    double pixscale_mas;                       /* detector pixel scale, mas (12.0); with sampling
                                                  and wavelength it fixes the telescope diameter */
    /* pupil */
    double obstruction;      /* central obstruction diameter / D (0.14) */
    int nspiders;            /* spider arms (4) */
    double spider_width;     /* arm width / D (0.006) */
    double spider_angle_deg; /* angle of the first arm from +x (45) */
    /* coronagraph */
    gl_sim_coronagraph coronagraph; /* (perfect) */
    double lyot_mask_ld;            /* focal-mask radius, lambda/D at wavelength_um[0] (2.0) */
    double lyot_stop;               /* Lyot-stop outer diameter / D (0.90) */
    /* wavefront errors (nm rms over the pupil; PSD power-law indices) */
    double static_nm;         /* static non-common-path error (30) */
    double static_index;      /* its PSD ~ f^-index (2.5) */
    int quasi_modes;          /* quasi-static patterns (4) */
    double quasi_nm;          /* rms of each pattern at unit weight (15) */
    double quasi_index;       /* (2.5) */
    double quasi_period_min;  /* shortest drift period, minutes (20) */
    double ao_nm;             /* fast AO residual inside the control radius (65) */
    double ao_index;          /* (1.5) */
    double control_radius_ld; /* AO control radius, cycles per pupil (20) */
    double ao_outside_gain;   /* PSD jump at the control radius (10) */
    int subexposures;         /* independent AO screens per frame (24) */
    /* photometry and detector */
    double star_flux;  /* star photons per frame and channel, whole PSF (1e9) */
    int noise;         /* photon (Poisson) and read noise on (1) */
    double read_noise; /* electrons rms per pixel (5) */
    /* options */
    double jitter_mas;     /* rms pointing jitter per axis and frame, mas (0) */
    double spots_ld;       /* satellite-spot separation, lambda/D at
                              wavelength_um[0] (0: no spots) */
    double spots_contrast; /* each spot / star peak at wavelength_um[0] (2e-3) */
    int refs;              /* also simulate a reference-star sequence (0) */
    /* observation (hour-angle track) */
    double latitude_deg;  /* site latitude (-30.6) */
    double longitude_deg; /* east positive (-70.4) */
    double height_m;      /* (2480) */
    double dec_deg;       /* target declination (-51.0) */
    double ha_start_h;    /* hour angle at mid-exposure of frame 0 (-0.5 h) */
    double exptime_s;     /* exposure time per frame (60 s) */
    double cadence_s;     /* start-to-start interval (75 s) */
    char date_obs[32];    /* UTC start of the first exposure (ISO 8601) */
    char target[48];      /* invented target name */
    char site[48];        /* invented observatory name */
    /* companions */
    int ncompanions;
    gl_sim_companion companions[GL_SIM_MAX_COMPANIONS];
} gl_sim_params;

/* Fills p with the defaults listed above. */
GL_API void gl_sim_params_init(gl_sim_params *p);

/* Checks every field; GL_ERR_USAGE with a message naming the parameter. */
GL_API gl_status gl_sim_params_check(const gl_sim_params *p);

/* What a run produces. All arrays have nframes entries. */
typedef struct gl_sim_result {
    gl_cube *cube; /* science frames: (x, y, frame) or (x, y, chan, frame) */
    gl_cube *psf;  /* noiseless off-axis PSF, centred at (size/2, size/2),
                      same exposure as a frame (scale 1); one plane per channel */
    gl_cube *refs; /* reference-star sequence (NULL unless params.refs) */
    long nframes;
    double *angle_deg;   /* parallactic angle at mid-exposure */
    double *ha_deg;      /* observed hour angle at mid-exposure */
    double *obs_dec_deg; /* observed declination at mid-exposure */
    double *mjd_mid;     /* MJD (UTC) at mid-exposure */
    double *star_x;      /* true star position in the raw frame, 0-based pixels */
    double *star_y;
    /* truth, one entry per companion */
    int ncompanions;
    double comp_flux[GL_SIM_MAX_COMPANIONS];    /* contrast x total of psf.fits (channel 0) */
    double comp_x_north[GL_SIM_MAX_COMPANIONS]; /* position in a north-up frame */
    double comp_y_north[GL_SIM_MAX_COMPANIONS];
    double star_flux_psf; /* whole-plane flux of the off-axis PSF (channel 0) */
    double telescope_m;   /* telescope diameter implied by the sampling */
    double ra_deg, dec_deg;
} gl_sim_result;

/* Runs the simulation. Deterministic for a given params (including seed),
 * whatever the number of OpenMP threads. Reports progress as "simulate".
 * *out is allocated; release with gl_sim_result_free.
 * Errors: GL_ERR_USAGE (bad parameter), GL_ERR_NOMEM, GL_ERR_INTERNAL. */
GL_API gl_status gl_sim_run(const gl_sim_params *p, gl_sim_result **out);

/* Frees a result; NULL is a no-op. */
GL_API void gl_sim_result_free(gl_sim_result *r);

/* Parses a coronagraph name ("none", "perfect", "lyot"). */
GL_API gl_status gl_sim_coronagraph_parse(const char *text, gl_sim_coronagraph *c);

/* simulate's tables (src/sim/products.c), normally to temporary names from
 * gl_outset_add; either path may be NULL (not written).
 * truth_csv: one row per companion: sep_px, pa_deg, contrast, sep_arcsec
 *   (p->pixscale_mas), x_north_up, y_north_up (where it lands in the
 *   north-up image), flux (contrast x the total of psf.fits, channel 0).
 * frames_csv: one row per frame: frame (from 0), angle_deg, star_x, star_y,
 *   hour_angle_deg, declination_deg, time_s (mid-exposure, seconds from
 *   DATE-OBS).
 * Errors: GL_ERR_IO naming the file, GL_ERR_NOMEM. */
GL_API gl_status gl_sim_tables_write(const gl_sim_params *p, const gl_sim_result *r,
                                     const char *truth_csv, const char *frames_csv);

#ifdef __cplusplus
}
#endif
#endif
