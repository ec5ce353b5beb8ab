"""The spectral survey of a recording: where the hiss lies against the programme.

One room per step, in the order the work flows (each module's notes give the
formulas and their sources)::

    segments   blocks -> Welch segments and their periodograms (Segmenter,
               segment_length); time spans -> which segments lie in them
               (check_spans, span_frames, classify_segments)
    welch      the streaming Welch PSD, the mean of the periodograms, of a
               whole file or of the frames inside/outside spans (WelchPSD, welch_psd)
    bands      IEC 61260-1 fractional-octave bands: centres, edges, band powers
               of a PSD (band_centre, band_centres, band_edges, band_levels)
    levels     each segment's level (broadband and balanced over octaves) and
               its density filed by 0.25 dB level step (balance_matrix,
               LEVEL_STEP_DB, SILENT_POWER)
    noise      the noise reference from spans, a noise clip or the quietest
               frames, and how far it can be trusted (find_quiet_frames,
               noise_from_spans, noise_from_clip, NoiseConfidence)
    programme  the programme estimate and the crossover where it sinks into the
               noise (programme_estimate, crossover)
    onepass    the whole survey in one streaming pass (Survey, survey_blocks,
               survey_array)

Import each name from the module where it lives, e.g.
``from audition.survey.onepass import survey_blocks``. This file imports
nothing, so importing one room does not load the others.
"""
