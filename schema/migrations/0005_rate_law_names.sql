-- nightcell store, migration 5: rate laws are named in words since version 0.2. Saved results (derived rows, not raw
-- data) carry the current names: first_order_plateau is now first_order_to_final, first_order is now
-- first_order_to_zero, and the rise law's working name first_order_rise is now first_order_rise_to_final
-- (host/nightcell/science/laws.py keeps the old names as aliases for one version). A name is
-- replaced only where it is a whole JSON string (quotes included), as a value ("model":"first_order") or as a key
-- ("first_order":{...}), so first_order_to_zero itself and any label that merely contains the words stay as they are.
-- Raw rows are not touched.

UPDATE results SET
    result_json = replace(replace(replace(result_json, '"first_order_plateau"', '"first_order_to_final"'),
                                  '"first_order"', '"first_order_to_zero"'),
                          '"first_order_rise"', '"first_order_rise_to_final"'),
    inputs_json = replace(replace(replace(inputs_json, '"first_order_plateau"', '"first_order_to_final"'),
                                  '"first_order"', '"first_order_to_zero"'),
                          '"first_order_rise"', '"first_order_rise_to_final"')
WHERE result_json LIKE '%"first\_order%' ESCAPE '\' OR inputs_json LIKE '%"first\_order%' ESCAPE '\';
