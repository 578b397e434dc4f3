-- Register map of the greenhouse soil probe (our fictional part, simulated
-- from this map by adapters/soil_bench.toml). 8-bit pointer.
return {
  ID       = { at = 0x00, width = 16, access = "ro", reset = 0x50A1, doc = "probe identity" },
  CONFIG   = { at = 0x01, reset = 0x04, fields = {
               RUN  = { bit = 0, doc = "1: measure continuously" },
               RATE = { lsb = 2, width = 2, values = { slow = 0, normal = 1, fast = 2 } },
             } },
  EVENTS   = { at = 0x02, reset = 0x00, fields = {
               DONE = { bit = 0, access = "w1c" },
               WET  = { bit = 1, access = "w1c" },
               LOST = { bit = 2, access = "rc" },
             } },
  MOISTURE = { at = 0x03, width = 16, access = "volatile", reset = 0x0BB8, scale = 0.01, unit = "%" },
  SOIL_T   = { at = 0x04, width = 16, access = "ro", reset = 0x0158, signed = true, scale = 0.0625, unit = "degC" },
  TRIM     = { at = 0x05, guard = true, fields = {
               OFFSET = { lsb = 0, width = 6, signed = true, scale = 0.5, unit = "%" },
             } },
}
