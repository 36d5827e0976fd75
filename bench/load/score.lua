-- One pump snapshot per request, as operations systems send them.
wrk.method = "POST"
wrk.headers["Content-Type"] = "application/json"
wrk.body = '{"rows":[{"vibration_rms":3.2,"bearing_temp_c":61,"hours_since_service":2500,"site":"river"}],"keys":["WO-1001"]}'
