/*
 * sim/internal.h -- declarations shared by the simulator's files: the pupil
 * and focal-plane geometry of each wavelength channel, phase-screen
 * generation, coronagraph models, the hour-angle track and random streams.
 *
 * Grids. Propagation uses an M x M FFT grid. Channel c has a pupil of
 * dpix = M / q_c grid pixels across the diameter D (q_c = pixels per
 * lambda_c/D in the focal plane), held in a P x P region centred in the grid.
 * Optical path errors are generated once on a "screen grid" of S x S samples
 * with spacing D / dmax (the largest channel pupil) and resampled bilinearly
 * onto each channel's region; for that channel the two grids coincide.
 */
#ifndef GLOAM_SIM_INTERNAL_H
#define GLOAM_SIM_INTERNAL_H

#include "gloam/sim.h"

#include <complex.h>
#include <fftw3.h>
#include <gsl/gsl_rng.h>

/* ---- random streams (rng.c) ---------------------------------------------- */

/* Independent streams: one per purpose and index, so that results do not
 * depend on the order in which frames are computed. */
enum {
    SIM_STREAM_SETUP = 1, /* static and quasi-static patterns, drift laws */
    SIM_STREAM_FRAME,     /* per science frame: jitter, AO screens, noise */
    SIM_STREAM_REF_SETUP, /* reference star: its drift laws */
    SIM_STREAM_REF_FRAME, /* per reference frame */
    SIM_STREAM_PSF        /* the off-axis PSF's AO screens */
};
/* New Mersenne-Twister generator seeded from (seed, stream, index). NULL on
 * allocation failure. */
gsl_rng *sim_rng_new(unsigned long seed, int stream, long index);

/* ---- pupil (pupil.c) ----------------------------------------------------- */

typedef struct sim_aperture {
    double outer;       /* outer diameter / D */
    double obstruction; /* central obstruction diameter / D */
    int nspiders;
    double spider_width; /* / D */
    double spider_angle_deg;
} sim_aperture;

/* Transmission (0..1, area coverage from 8 x 8 sub-samples) of a P x P
 * region whose pixel (i, j) is at ((i - (P-1)/2) / dpix, (j - (P-1)/2) / dpix)
 * in units of D. */
void sim_aperture_draw(const sim_aperture *a, int P, double dpix, double *out);

/* ---- phase screens (screens.c) ------------------------------------------ */

/* Power spectral density of a screen, in cycles per pupil f:
 * P(f) = f^-index for fmin <= f < fcut; above fcut P(fcut) * gain *
 * (f/fcut)^(-11/3) (uncorrected turbulence beyond the AO control radius);
 * zero below fmin. fcut <= 0: no cut. */
typedef struct sim_psd {
    double index;
    double fmin;
    double fcut;
    double gain;
} sim_psd;

typedef struct sim_screens {
    int S;         /* screen grid size */
    int L;         /* FFT size (about twice S: periodicity outside the pupil) */
    double dmax;   /* screen samples per D */
    double *pupil; /* S x S: 1 inside the outer aperture (rms weights) */
    double npupil;
    fftw_plan plan; /* in-place backward FFT of L x L */
} sim_screens;

/* Smallest n' >= n with prime factors 2, 3, 5, 7 only (fast FFTW sizes). */
int sim_fft_size(int n);

gl_status sim_screens_init(sim_screens *s, int S, double dmax);
void sim_screens_free(sim_screens *s);
/* Draws one screen into out (S x S): Gaussian random field with the PSD,
 * piston, tip and tilt removed over the pupil, scaled to rms_nm over the pupil when
 * exact != 0, else scaled so that the expected variance of the part inside
 * fcut is rms_nm^2. work: L*L complex. Thread-safe with distinct work/rng. */
void sim_screen_draw(const sim_screens *s, const sim_psd *psd, double rms_nm, int exact,
                     gsl_rng *rng, fftw_complex *work, double *out);
/* Bilinear resampling of a screen onto channel region P x P with dpix grid
 * pixels per D. */
void sim_screen_resample(const sim_screens *s, const double *screen, int P, double dpix,
                         double *out);

/* ---- optics and coronagraphs (optics.c, coronagraph.c) -------------------- */

typedef struct sim_channel {
    double lambda_nm;
    double q;         /* focal pixels per lambda/D */
    double dpix;      /* pupil diameter in grid pixels */
    int P, off;       /* region size and offset in the M grid */
    double *amp;      /* P x P pupil transmission */
    double *stop;     /* P x P Lyot stop (Lyot model only) */
    double amp_sum2;  /* sum amp^2 */
    double flux_norm; /* electrons per unit |FFT|^2 */
} sim_channel;

typedef struct sim_optics sim_optics;

/* A coronagraph model: applied to a pupil field in the M x M grid (region
 * filled, zero elsewhere), it leaves the field that the final FFT images.
 * on_axis: the science path (mask in); otherwise the off-axis PSF path (what
 * the optics do to a source far from the mask). */
typedef struct sim_coro_ops {
    const char *name;
    void (*apply)(const sim_optics *o, const sim_channel *ch, fftw_complex *field, int on_axis);
} sim_coro_ops;

const sim_coro_ops *sim_coro_lookup(gl_sim_coronagraph c);

struct sim_optics {
    int M;
    long nx, ny;
    fftw_plan fwd, bwd; /* in-place M x M */
    double *focal_mask; /* M x M transmission of the Lyot focal mask, or NULL */
    const sim_coro_ops *coro;
    int nchan;
    sim_channel ch[GL_SIM_MAX_CHANNELS];
};

/* Builds grids, pupils, plans and normalisations for p. */
gl_status sim_optics_init(sim_optics *o, const gl_sim_params *p);
void sim_optics_free(sim_optics *o);

/* A source to image: pupil phasor (P x P, amp * exp(i phase)) times a tilt
 * moving the image by (dx, dy) focal pixels, weighted. */
void sim_optics_image(const sim_optics *o, const sim_channel *ch, const double complex *phasor,
                      double dx, double dy, double weight, int coronagraph, fftw_complex *work,
                      double *acc);
/* Complex elements needed by the work array of sim_optics_image. */
size_t sim_optics_work_size(const sim_optics *o);

/* ---- hour-angle track (track.c) ------------------------------------------ */

typedef struct sim_track {
    double mjd0;   /* UTC MJD at mid-exposure of frame 0 */
    double ra_deg; /* ICRS right ascension making the observed HA(frame 0) = ha_start */
    double ha0_deg;
    double lst0_deg;
} sim_track;

gl_status sim_track_init(sim_track *t, const gl_sim_params *p);
/* Observed hour angle, observed declination and parallactic angle (deg) dt
 * seconds after the mid-exposure of frame 0 (any output may be NULL). */
void sim_track_at(const sim_track *t, const gl_sim_params *p, double dt, double *ha_deg,
                  double *dec_deg, double *pa_deg);

/* ---- headers (header.c) --------------------------------------------------- */

/* Observation, optics and simulation keywords plus a celestial WCS for the
 * orientation of frame 0 (angle0_deg). */
gl_status sim_header_fill(gl_header *h, const gl_sim_params *p, const sim_optics *o,
                          const sim_track *t, double angle0_deg, double telescope_m,
                          const char *what);

#endif
