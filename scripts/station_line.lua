-- The end-of-line configuration of a greenhouse climate node, as a test
-- station runs it on every board: each step is a test case, each
-- measurement a value with limits for the factory database.
--   buscue run scripts/station_line.lua --report junit:line.xml
--   buscue station scripts/station_line.lua --fixture a=sim --fixture b=sim

local light = bus.device(0x2B, { width = 16, order = "little", map = require("maps.canopy_light") })
local vent = bus.device(0x11, { map = require("maps.vent") })
bus.retry({ attempts = 8, delay_ms = 1 })

step("identify", function()
  check_eq(light:get("ID"), 0x1C5A, "light sensor ID")
  check_eq(vent:get("ID"), 0xA7, "vent controller ID")
end)

step("configure", function()
  light:set("CONTROL", 0x0003)             -- GAIN x64, as the line's lamp needs
  check_eq(light:get("CONTROL"), 0x0003, "light CONTROL read back")
  vent:set("POSITION", param("vent_open", 25))
end)

step("measure", function()
  measure("visible_counts", light:get("VISIBLE"), { low = 5000, high = 40000, unit = "counts" })
  measure("infrared_counts", light:get("INFRARED"), { low = 1000, high = 10000, unit = "counts" })
end)
