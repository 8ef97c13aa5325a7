-- the in-scope SKUs' key values that hold '|', which 008 joins them with into the product id
-- (when no market build mapped the SKUs): ('A|B', 'C') and ('A', 'B|C') would be one product
select catalogue_sku, key_name, key_value
from choice_sku_key_values
where contains(key_value, '|')
order by catalogue_sku, list_position($product_keys, key_name)
