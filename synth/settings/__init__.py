"""Settings: the only code that reads preset files, event lists and MIDI files.

Each module turns one kind of file or table into typed, frozen objects and checks
every key, type, unit and range while reading, with the one-line
:class:`~synth.errors.ConfigError` of :mod:`synth.config` (file, key, value, what
is allowed).  Note names may be spelt any way (``Bb3``, ``A#3``, ``B♭3``, ``A♯3``) and
are kept in the sharp spelling.

=================  ==========================================================
module             reads
=================  ==========================================================
``instrument``     bar files and instrument presets -> ``Instrument``, ``BarFile``
``geometry``       ``[undercut]``, bar sizes, the undercut family
``material``       alloy presets and inline tables -> ``Material``
``mallet``         mallet presets -> ``Mallet``; ``[sound]`` -> ``SoundSettings``
``tubes``          ``[tubes]`` -> ``TubeSettings``; a bar's ``tube`` override
``motor``          ``[motor]`` -> ``MotorSpec`` and the disc phase step
``damping``        ``[supports]``, ``[damping]`` and calibration files
``correction``     ``[solid_correction]`` -> ``CorrectionTable``
``score``          event lists (TOML) and MIDI files -> ``Score``; a MIDI file's
                   messages at their samples (``play --midi-file``)
``comparison``     the blind comparison's key (TOML) and saved answers (JSON)
``variants``       a preset read with dotted keys set (design sweeps)
=================  ==========================================================

Layer: above ``physics`` and ``engine`` (whose dataclasses it builds), below
``voicing``, ``reports``, ``api`` and ``cli``, which receive settings objects and
never open a preset themselves.
"""
