-- Register map of the vent actuator controller (our fictional part).
-- 8-bit pointer, 8-bit registers.
return {
  ID       = { at = 0x00, access = "ro", reset = 0xA7 },
  POSITION = { at = 0x01, reset = 0x00, scale = 100 / 255, unit = "% open" },
  STATUS   = { at = 0x02, access = "ro", reset = 0x01, fields = {
               READY  = { bit = 0, values = { moving = 0, ready = 1 } },
               STALL  = { bit = 1 },
             } },
}
