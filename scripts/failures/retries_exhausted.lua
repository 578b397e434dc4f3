-- Without enough retries the flaky vent controller eventually fails the
-- run (exit code 3); the frame log shows each attempt.
bus.retry({ attempts = param("attempts", 2), delay_ms = 1 })
local vent = bus.device(0x11)
for i = 1, 200 do
  vent:get(0x02)
end
