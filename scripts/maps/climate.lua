-- Register map of the greenhouse climate sensor (our fictional part).
-- 8-bit pointer, 16-bit big-endian registers. Map format 2 (README,
-- "Register maps"): access kinds, reset values, enums and scaling.
return {
  ID          = { at = 0x00, width = 16, access = "ro", reset = 0x5E11, doc = "reads 0x5E11" },
  CONTROL     = { at = 0x01, width = 16, reset = 0x0000, fields = {
                    START  = { bit = 0, doc = "write 1 to convert; reads 1 while busy" },
                    AVG    = { lsb = 1, width = 2, doc = "averaging time",
                               values = { ["2ms"] = 0, ["4ms"] = 1, ["8ms"] = 2, ["16ms"] = 3 } },
                    HEATER = { bit = 3, values = { off = 0, on = 1 } },
                  } },
  STATUS      = { at = 0x02, width = 16, access = "volatile", reset = 0x0000, fields = {
                    DRDY  = { bit = 0, access = "ro", doc = "result ready; cleared by reading TEMPERATURE" },
                    BUSY  = { bit = 1, access = "ro" },
                    ALERT = { bit = 2, access = "ro", doc = "last temperature above TEMP_HIGH" },
                  } },
  TEMPERATURE = { at = 0x03, width = 16, access = "volatile", signed = true, scale = 0.01, unit = "degC" },
  HUMIDITY    = { at = 0x04, width = 16, access = "volatile", scale = 0.01, unit = "%RH" },
  TEMP_HIGH   = { at = 0x05, width = 16, signed = true, scale = 0.01, unit = "degC", doc = "alert threshold" },
}
