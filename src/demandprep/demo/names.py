"""Invented names for the demo world: a grocery chain, its regions and towns, coffee roasters
and generic grocery items. None of them is meant to name a real business or person."""

CHAIN = "Fernhill Market"
STORE_LABEL = "Fernhill Select"
TIMEZONE = "Europe/Berlin"

REGIONS = (
    "Harrowfield",
    "Lindenmoor",
    "Saltmarsh Coast",
    "Quillon Downs",
    "Ostrevale",
    "Brackenridge",
)

TOWNS = (
    "Ashcombe",
    "Bellwick",
    "Corrindale",
    "Dunmarrow",
    "Elsworth Green",
    "Farrowgate",
    "Glenhallow",
    "Hollisford",
    "Ivenbury",
    "Jasperwell",
    "Kettleby",
    "Larchmont Vale",
    "Moorhaven",
    "Nettlecombe",
    "Oakrest",
    "Pellingham",
    "Quarrybrook",
    "Rosthwaite",
    "Sellmoor",
    "Thistlewood",
    "Umberfield",
    "Vantry",
    "Wexhollow",
    "Yarrowby",
    "Zennor Cross",
    "Amberleigh",
    "Brindlecote",
    "Cresswold",
    "Dovemere",
    "Emberhythe",
)

# roaster -> owning firm (one firm owns two roaster brands; the chain owns its store label)
ROASTER_FIRMS = {
    "Alder & Crane": "Alder & Crane Roasters",
    "Bluestone": "Bluestone Coffee Group",
    "Gullhaven": "Bluestone Coffee Group",
    "Copperleaf": "Copperleaf Roastery",
    "Driftwood": "Driftwood Bean Co",
    "Emberline": "Emberline Coffee",
    STORE_LABEL: CHAIN,
}

BLENDS = (
    "House Blend",
    "Morning Blend",
    "Dark Velvet",
    "Decaf",
    "Highland",
    "Espresso Forte",
)

# category -> (item stem, typical price in cents, pack grams or None for weight-sold per kg)
GROCERY_ITEMS: dict[str, tuple[tuple[str, int, int | None], ...]] = {
    "dairy": (
        ("Whole milk 1 l", 119, 1000),
        ("Semi-skimmed milk 1 l", 109, 1000),
        ("Natural yoghurt", 89, 500),
        ("Butter", 249, 250),
        ("Mild cheddar", 329, 400),
        ("Cream cheese", 149, 200),
        ("Greek-style yoghurt", 199, 500),
        ("Single cream", 99, 250),
    ),
    "bakery": (
        ("White loaf", 139, 800),
        ("Wholemeal loaf", 159, 800),
        ("Croissants 4 pack", 199, 240),
        ("Rye bread", 229, 750),
        ("Bread rolls 6 pack", 129, 360),
        ("Oat biscuits", 149, 300),
    ),
    "produce": (
        ("Bananas loose", 139, None),
        ("Apples loose", 229, None),
        ("Carrots loose", 99, None),
        ("Tomatoes loose", 349, None),
        ("Potatoes 2 kg bag", 249, 2000),
        ("Onions 1 kg bag", 129, 1000),
        ("Lettuce", 89, 300),
        ("Cucumber", 69, 350),
    ),
    "pantry": (
        ("Spaghetti", 119, 500),
        ("Long-grain rice", 189, 1000),
        ("Chopped tomatoes tin", 69, 400),
        ("Rolled oats", 149, 1000),
        ("Plain flour", 99, 1000),
        ("White sugar", 129, 1000),
        ("Sunflower oil", 279, 1000),
        ("Strawberry jam", 199, 340),
        ("Peanut butter", 249, 340),
        ("Baked beans tin", 79, 415),
    ),
    "beverages": (
        ("Orange juice", 219, 1000),
        ("Apple juice", 189, 1000),
        ("Sparkling water", 59, 1500),
        ("Still water 6 pack", 249, 9000),
        ("Cola", 149, 1500),
        ("Black tea 80 bags", 299, 250),
        ("Green tea 40 bags", 249, 80),
    ),
    "snacks": (
        ("Salted crisps", 129, 150),
        ("Milk chocolate bar", 109, 100),
        ("Dark chocolate bar", 139, 100),
        ("Mixed nuts", 349, 200),
        ("Popcorn", 119, 100),
        ("Oat bars 6 pack", 229, 150),
    ),
    "frozen": (
        ("Frozen peas", 149, 1000),
        ("Fish fingers", 289, 450),
        ("Vanilla ice cream", 329, 900),
        ("Frozen pizza", 259, 400),
        ("Oven chips", 199, 1000),
    ),
    "household": (
        ("Washing-up liquid", 119, 500),
        ("Kitchen towels 2 pack", 219, 300),
        ("Toilet tissue 9 pack", 449, 900),
        ("Laundry powder", 699, 2600),
        ("Bin bags 20 pack", 189, 400),
    ),
}

GROCERY_VARIANTS = ("", "Value ", "Organic ")
