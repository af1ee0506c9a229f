/* Synthetic time records and spectra of an invented scenario, with their true values beside them.
 *
 * ---------------------------------------------------------------------------------------------
 * The invented scenario (the defaults of cs_simulate_default_params): a dense vapour of an
 * alkali-like two-level emitter whose line lies at 384.2304844685 THz (invented, not a
 * measurement of any real sample). After a short pump pulse the sample emits a superradiant
 * burst, whose line is broad and shifted, followed by a tail of slower emission, whose line is
 * narrow. Both lines shift and broaden linearly with the number density n:
 *
 *   burst centre  = reference + burst_shift0_hz + burst_shift_slope_hz_m3 * n
 *   burst FWHM    = burst_fwhm0_hz + burst_fwhm_slope_hz_m3 * n
 *   tail centre   = reference + tail_shift0_hz + tail_shift_slope_hz_m3 * n
 *   tail FWHM     = tail_fwhm0_hz + tail_fwhm_slope_hz_m3 * n
 *
 * (n in m^-3 and slopes in Hz m^3 inside; 1 Hz cm^3 = 1e-6 Hz m^3.) Default slopes: burst shift
 * -6e-7 Hz cm^3, burst FWHM +1.2e-7 Hz cm^3, tail shift -1.5e-7 Hz cm^3, tail FWHM
 * +1e-8 Hz cm^3; at zero density the burst has FWHM 4 MHz and the tail 1.1 MHz.
 *
 * Records (after heterodyne mixing with a local oscillator at lo_hz, upper sideband: a line at
 * absolute frequency nu appears at nu - lo_hz):
 *
 *   z(t) = A_b sech((t - t_p)/tau) exp(i (2 pi f_b t + phi_b))
 *        + A_t exp(-Gamma (t - t_s)/2) exp(i (2 pi f_t t + phi_t))   for t >= t_s = t_p + delay
 *        + complex white Gaussian noise of standard deviation sigma in each of I and Q
 *
 * with f_b, f_t the burst and tail centres minus lo_hz. The burst's time constant follows from its
 * FWHM: the power spectrum of sech(t/tau) has FWHM CS_GATEFIT_SECH_FWHM_TAU / tau, so
 * tau = CS_GATEFIT_SECH_FWHM_TAU / burst FWHM. The tail's INTENSITY decays at the rate
 * Gamma = 2 pi x tail FWHM (its amplitude at Gamma/2), the project's convention. The phases
 * phi_b, phi_t are drawn uniformly for every shot. A real record holds Re z plus real noise.
 *
 * Spectra: on a frequency axis of n_points points spanning span_hz around
 * reference + spectrum_offset_hz, y = baseline0 + baseline_slope (nu - reference)
 * + H_b P_b(nu) + H_t L(nu) + Gaussian noise of standard deviation spectrum_sigma (written in the
 * sigma column), with L a Lorentzian of the tail's centre and FWHM and peak 1, and P_b a
 * Lorentzian (or sech^2) of the burst's centre and FWHM and peak 1.
 *
 * Random numbers: GSL's mt19937. Every file has its own stream, seeded from (seed, stream) by
 * the SplitMix64 mixing function, so a file depends only on the parameters, its density and its
 * stream number, and the same seed gives identical bytes.
 *
 * Files written by cs_simulate_campaign into a folder (names start "synthetic_"):
 *   synthetic_record_dNN[_sMM].csv / .npy  or  synthetic_spectrum_dNN.csv   the data;
 *   manifest.csv   file,density_cm^-3,reference_hz[,temperature_K][,thickness_um]  (read by
 *                  `collshift series`);
 *   truth.csv      one row per file with the true values (see cs_simulate_truth).
 * Text files carry "# key = value unit" metadata lines: "synthetic = yes ...", the scenario,
 * density, sample_rate, lo, reference, seed, stream, and every true value as "true_..." lines.
 * A .npy file has no room for metadata; its metadata are the manifest and truth rows.
 * ---------------------------------------------------------------------------------------------
 * Ownership: records and spectra returned here are released with cs_record_free /
 * cs_spectrum_free. Nothing here prints or exits. */
#ifndef CS_SIMULATE_H
#define CS_SIMULATE_H

#include <stddef.h>
#include <stdint.h>
#include <collshift/error.h>
#include <collshift/io.h>

#ifdef __cplusplus
extern "C" {
#endif

/* What a campaign writes. */
typedef enum cs_simulate_kind {
    CS_SIMULATE_RECORD = 0,    /* time records */
    CS_SIMULATE_SPECTRUM       /* spectra */
} cs_simulate_kind;

/* File format of the data files. */
typedef enum cs_simulate_format {
    CS_SIMULATE_TEXT = 0,      /* comma-separated text with metadata lines */
    CS_SIMULATE_NPY            /* NumPy .npy (records only; one file per density holds every shot) */
} cs_simulate_format;

/* Shape of the broad (burst-era) line in spectra. */
typedef enum cs_simulate_shape {
    CS_SIMULATE_LORENTZ = 0,
    CS_SIMULATE_SECH2          /* sech^2, the power spectrum of a sech burst */
} cs_simulate_shape;

/* All tunables, SI units. Take cs_simulate_default_params() and change what you need. */
typedef struct cs_simulate_params {
    cs_simulate_kind kind;
    cs_simulate_format format;
    /* densities, m^-3 (borrowed: the caller keeps the array alive) */
    const double *densities_m3;
    size_t ndensities;
    size_t shots;                     /* records per density (>= 1; spectra: 1 per density) */
    unsigned long seed;
    /* lines */
    double reference_hz;              /* the unperturbed line */
    double burst_shift0_hz, burst_shift_slope_hz_m3;
    double burst_fwhm0_hz, burst_fwhm_slope_hz_m3;
    double tail_shift0_hz, tail_shift_slope_hz_m3;
    double tail_fwhm0_hz, tail_fwhm_slope_hz_m3;
    /* records */
    int is_complex;                   /* 1: I/Q after heterodyne (default); 0: real */
    double lo_hz;                     /* local oscillator (default reference - 250 MHz) */
    double sample_rate_hz;            /* default 1 GHz */
    size_t samples;                   /* record length (default 4096) */
    double burst_peak_s;              /* t_p, from the first sample (default 0.6 us) */
    double tail_delay_s;              /* t_s - t_p (default 0: the tail starts at the burst
                                         peak, under the burst) */
    double burst_amplitude, tail_amplitude;   /* A_b, A_t (default 1, 0.3) */
    double noise_sigma;               /* per quadrature (default 0.01) */
    /* spectra */
    size_t points;                    /* default 4096 */
    double span_hz;                   /* default 800 MHz */
    double spectrum_offset_hz;        /* axis centre minus reference (default -100 MHz) */
    cs_simulate_shape broad_shape;    /* default Lorentzian */
    double burst_height, tail_height; /* H_b, H_t (default 100, 50) */
    double baseline0, baseline_slope_per_hz;  /* default 10 and 0 */
    double spectrum_sigma;            /* default 1 */
    /* optional manifest columns (NaN: not written) */
    double temperature_k, thickness_m;
    /* campaign */
    int force;                        /* 1: replace existing files */
} cs_simulate_params;

/* The invented scenario's defaults (see the top of this file); densities none, shots 1, seed 1. */
cs_simulate_params cs_simulate_default_params(void);

/* Check every parameter (finite, positive where needed, lines inside the band the sample rate
 * can hold, densities >= 0, lines with positive widths at every density). Returns CS_OK or
 * CS_EINVAL with a message naming the parameter. */
int cs_simulate_check(const cs_simulate_params *p, cs_error *err);

/* The true values at one density. */
typedef struct cs_simulate_truth {
    double density_m3;
    double burst_center_hz, burst_fwhm_hz, tail_center_hz, tail_fwhm_hz;
    double burst_shift_hz, tail_shift_hz;     /* centre minus reference */
    double era_shift_hz;                      /* burst centre minus tail centre */
    double burst_tau_s, burst_peak_s;         /* records */
    double tail_start_s, tail_gamma_per_s;    /* records: Gamma = 2 pi x tail FWHM */
    double burst_offset_hz, tail_offset_hz;   /* records: centre minus lo_hz */
    double burst_area, tail_area;             /* spectra: areas of the two lines (y x Hz) */
} cs_simulate_truth;

/* Fill *t with the true values at density_m3. */
void cs_simulate_truth_at(const cs_simulate_params *p, double density_m3, cs_simulate_truth *t);

/* Make one record at density_m3 from random stream `stream` (any number; campaigns use the
 * file index times the number of shots plus the shot). *out receives a new record (the caller
 * frees it with cs_record_free) with dt = 1/sample_rate, t0 = 0, and metadata lines (synthetic,
 * scenario, density, sample_rate, lo, reference, seed, stream, true_...). truth may be NULL.
 * Returns CS_OK, CS_EINVAL (bad parameters, see cs_simulate_check) or CS_ENOMEM; *out is NULL on
 * failure. */
int cs_simulate_record(const cs_simulate_params *p, double density_m3, unsigned long stream,
                       cs_record **out, cs_simulate_truth *truth, cs_error *err);

/* Make one spectrum at density_m3, as cs_simulate_record; the spectrum has a sigma array (every
 * point spectrum_sigma) and the metadata lines. Free with cs_spectrum_free. */
int cs_simulate_spectrum(const cs_simulate_params *p, double density_m3, unsigned long stream,
                         cs_spectrum **out, cs_simulate_truth *truth, cs_error *err);

/* Format a record or spectrum as the text a campaign writes (metadata lines, then a header
 * "time_us,i,q" / "time_us,y" or "frequency_hz,y,sigma", then the rows). *text receives a
 * malloc'ed NUL-terminated string (the caller frees it) and *len its length. CS_OK, CS_EINVAL,
 * CS_ENOMEM. */
int cs_simulate_format_record(const cs_record *r, char **text, size_t *len, cs_error *err);
int cs_simulate_format_spectrum(const cs_spectrum *s, char **text, size_t *len, cs_error *err);

/* Write a whole density series into folder dir (created, with its parents, if missing): one file
 * per density (and per shot for text records), manifest.csv and truth.csv. Before writing
 * anything, refuses (CS_EIO, naming the file) when a file it would write exists, unless
 * p->force. Every file is written atomically (a temporary file, then a rename).
 * nfiles (may be NULL) receives the number of data files written. Returns CS_OK, CS_EINVAL (bad
 * parameters, no densities, npy spectra), CS_EIO, CS_ENOMEM. */
int cs_simulate_campaign(const char *dir, const cs_simulate_params *p, size_t *nfiles,
                         cs_error *err);

/* The name cs_simulate_campaign gives data file `index` (0-based density index) and shot
 * (SIZE_MAX: one file for every shot) into buf of size n, e.g. "synthetic_record_d03_s01.csv".
 * Returns buf. */
char *cs_simulate_file_name(const cs_simulate_params *p, size_t index, size_t shot, char *buf,
                            size_t n);

#ifdef __cplusplus
}
#endif
#endif /* CS_SIMULATE_H */
