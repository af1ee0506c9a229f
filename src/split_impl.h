/* Private interface shared by the split sources (split.c, split_fit.c, split_sweep.c). */
#ifndef CS_SPLIT_IMPL_H
#define CS_SPLIT_IMPL_H

#include <collshift/split.h>

#if defined(__GNUC__)
#define CS_SPLIT_INTERNAL __attribute__((visibility("hidden")))
#else
#define CS_SPLIT_INTERNAL
#endif

/* What every fit of a run needs. */
typedef struct split_ctx {
    cs_gate_workspace *ws;
    const cs_split_params *p;
} split_ctx;

/* Make every number of l NaN and ok 0. */
CS_SPLIT_INTERNAL void cs_split_impl_line_nan(cs_split_line *l);
/* Free the fits inside f (not f itself) and reset those pointers. */
CS_SPLIT_INTERNAL void cs_split_impl_fit_release(cs_split_fit *f);

/* Set f's status, its message (printf-style) and make its line NaN. */
CS_SPLIT_INTERNAL void cs_split_impl_fit_fail(cs_split_fit *f, cs_split_status st, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 3, 4)))
#endif
    ;
/* sqrt(2 ln(m / p)): the significance noise alone reaches with probability ~ p among m trial
 * frequencies (split.h). */
CS_SPLIT_INTERNAL double cs_split_impl_min_significance(size_t m, double fap);
/* shift = centre - reference when l is measured and ref_hz finite, else NaN. */
CS_SPLIT_INTERNAL void cs_split_impl_set_shift(cs_split_line *l, double ref_hz);

/* Fit one era of rec through gate g (resolved) with `model` (gate_aware as detected), filling
 * *f (whose spec and gate fields the caller may have set; f's previous fits are released).
 * shots/nshots: when nshots > 1 the gated spectra of all shots are power-averaged (plain models
 * only). noise_floor_sd: sigma for NOISE_GIVEN with noise_sd 0. from: a converged gate-aware fit
 * of the same model whose values start this one (NULL: automatic starting values). hint: when
 * from is NULL and the model is a single gate-aware component, its starting values (NULL: none;
 * NaN fields are ignored). Returns CS_OK when the outcome is
 * in f->status (OK or an analysis failure), or a fatal code (CS_ENOMEM, CS_EUNSUP, CS_EINVAL,
 * CS_EDATA for unusable samples). */
CS_SPLIT_INTERNAL int cs_split_impl_fit_era(const split_ctx *cx, const cs_record *rec,
                                            cs_record *const *shots, size_t nshots,
                                            cs_split_era era, const cs_gate *g,
                                            const char *model, int gate_aware, double lo_hz,
                                            double ref_hz, double noise_floor_sd,
                                            const cs_gatefit_result *from,
                                            const cs_gatefit_start *hint, cs_split_fit *f,
                                            cs_error *err);

/* The whole-record estimate of sh (sh->lo_hz, ref_hz set): the plain whole_model fitted to the
 * PSD of the whole record (power-averaged over the shots when nshots > 1); fills sh->whole and
 * sh->whole_line. Returns CS_OK (outcome in sh->whole.status) or a fatal code. */
CS_SPLIT_INTERNAL int cs_split_impl_whole(const split_ctx *cx, const cs_record *rec,
                                          cs_record *const *shots, size_t nshots,
                                          cs_split_shot *sh, cs_error *err);
/* The matrix pencil of sh's tail gate up to the envelope's fade; fills sh->pencil*. Returns CS_OK
 * (outcome in sh->pencil_status) or CS_ENOMEM. */
CS_SPLIT_INTERNAL int cs_split_impl_pencil(cs_gate_workspace *ws, const cs_record *rec,
                                           cs_split_shot *sh, cs_error *err);
/* Agreement of two measured lines (NaN z when either is not measured). */
CS_SPLIT_INTERNAL void cs_split_impl_agree(const cs_split_line *a, const cs_split_line *b, double thr,
                                           cs_split_agree *g);

/* The gate sweep of one shot whose eras were fitted (sh->era[*] hold the default gates and
 * results). Fills sh->sweep, sh->nsweep, sh->sweep_max_dev. Returns CS_OK or a fatal code. */
CS_SPLIT_INTERNAL int cs_split_impl_sweep(const split_ctx *cx, const cs_record *rec,
                                          cs_split_shot *sh, cs_error *err);

#endif
