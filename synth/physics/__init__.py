"""Pure physical models: arrays, floats and dataclasses in and out; no audio, no printing."""
