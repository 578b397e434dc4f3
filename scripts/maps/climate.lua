-- Register map of the greenhouse climate sensor (our fictional part).
-- 8-bit pointer, 16-bit big-endian registers.
return {
  ID          = { at = 0x00, doc = "reads 0x5E11" },
  CONTROL     = { at = 0x01, fields = {
                    START  = { bit = 0, doc = "write 1 to convert; reads 1 while busy" },
                    AVG    = { lsb = 1, width = 2, doc = "averaging: 2, 4, 8, 16 ms" },
                    HEATER = { bit = 3 },
                  } },
  STATUS      = { at = 0x02, fields = {
                    DRDY  = { bit = 0, doc = "result ready; cleared by reading TEMPERATURE" },
                    BUSY  = { bit = 1 },
                    ALERT = { bit = 2, doc = "last temperature above TEMP_HIGH" },
                  } },
  TEMPERATURE = { at = 0x03, doc = "signed, 0.01 degC per count" },
  HUMIDITY    = { at = 0x04, doc = "0.01 %RH per count" },
  TEMP_HIGH   = { at = 0x05, doc = "alert threshold, signed 0.01 degC" },
}
