"""Malformed and non-odorant inputs shared by the bad-input, intake and hostile-input tests (each case:
the input and the words its refusal must contain). Imported by name; pytest puts tests/ on the path."""

from library.structures import standardize

GOOD_MOLFILE = standardize("CCO").molfile

BAD_SMILES = [
    ("C1CC", "could not parse SMILES"),                    # unclosed ring
    ("C(C", "could not parse SMILES"),                     # unbalanced parenthesis
    ("CC)C", "could not parse SMILES"),
    ("Xx", "could not parse SMILES"),                      # not an element
    ("C[Zz]C", "could not parse SMILES"),
    ("c1cccc1", "cannot be kekulized"),                    # five-membered aromatic ring without [nH]
    ("C(C)(C)(C)(C)C", "valence"),                         # pentavalent carbon
    ("O(C)(C)C", "valence"),
    ("[CH3]", "radical"),
    ("C[CH2]", "radical"),
    ("", "empty"),
    ("   ", "empty"),
    ("CC O", "single token"),                              # name glued to the SMILES
    ("CCO ethanol", "single token"),
    ("[Fe]", "metal"),
    ("CC[Hg]C", "organometallic"),
    ("[U]", "metal"),
    ("CCCCO.c1ccccc1CCCCCC", "mixture"),                     # two organic components
    ("CCCCCCO.CCCCCCCCN", "mixture"),
    ("C" * 61, "more than the limit"),                     # too many heavy atoms
    ("C" * 250_000, "characters long"),                    # huge field
    ("C\x00C", "NUL"),
    ("InChI=1S/garbage", "could not parse InChI"),
    ("InChI=", "could not parse InChI"),
    ("[C@@H", "could not parse SMILES"),
    ("C=1CC", "could not parse SMILES"),
    ("C%1CC", "could not parse SMILES"),
    ("[2H+2]]", "could not parse SMILES"),
]

BAD_MOLFILES = [
    (GOOD_MOLFILE.replace("M  END", ""), "truncated"),                          # truncated record
    ("\n\n\n  3  2  0  0  0  0  0  0  0  0999 V2000\nM  END\n", "could not parse the molfile"),
    (GOOD_MOLFILE.replace(" C ", " Q ", 1), "not supported"),                  # query atom, no element
    ("\n  RDKit\n\n  0  0  0  0  0  0  0  0  0  0999 V2000\nM  END\n", "no atoms"),
    ("\n\n\n  1  0  0  0  0  0  0  0  0  0999 V2000\n    0.0 0.0 0.0 C\nM  END\n",
     "could not parse the molfile"),
]

BAD_CSV = [
    (b"", "is empty"),
    (b"\n\n", "is empty"),
    (b"name,smiles\n", "no data rows"),
    (b"title,structure\nEthanol,CCO\n", "unknown column"),
    (b"name,price\nEthanol,3\n", "unknown column"),
    (b"smiles\nCCO\n", "needs a 'name' column"),
    (b"name\nEthanol\n", "needs a 'name' column"),
    (b"name,smiles,smiles\nEthanol,CCO,CCO\n", "more than once"),
    (b"name,smiles\nEthanol,\"CCO\n", "malformed"),                               # unterminated quote
    (b"name,smiles\n\xff\xfeE\x00t\x00h\x00", "NUL"),                            # UTF-16 text
    (b"name,smiles\nCaf\xe9,CCO\n", "not UTF-8"),                                 # Latin-1 accent
    (b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR", "binary"),
]

BAD_CSV_ROWS = [
    (b"name,smiles\nEthanol,CCO,extra\n", "fields but the header has"),
    (b"name,smiles\n,CCO\n", "name is empty"),
    (b"name,smiles\nEthanol,C1CC\n", "could not parse SMILES"),
    (b"name,smiles,cas,cas_source\nEthanol,CCO,64-17-6,from memory\n", "check digit"),
    (b"name,smiles,cas\nEthanol,CCO,64-17-5\n", "needs a source"),
    (b"name,smiles,odor\nEthanol,CCO,citrus\n", "need a source"),
    (b"name,smiles,structure_source\nEthanol,CCO,rumour\n", "does not start with one of"),
    (b"name,smiles,structure_source\nEthanol,CCO,literature\n", "needs a reference"),
    (b"name,smiles,odor,odor_source\nEthanol,CCO,citrus:1.5,from memory\n", "outside 0-1"),
    (b"name,smiles,odor,odor_source\nEthanol,CCO,citrus:strong,from memory\n", "not a number"),
    (b"name,smiles,odor,odor_source\nEthanol,CCO,citrus|citrus,from memory\n", "given twice"),
    (b"name,smiles,odor,odor_source\nEthanol,CCO,boozy,from memory\n", "not in the vocabulary"),
    (b"name,smiles,formula\nEthanol,CCO,C2H5O\n", "does not match the structure"),
    (b"name,smiles,inchikey\nEthanol,CCO,XLYOFNOQVPJJNP-UHFFFAOYSA-N\n", "does not match the structure"),
    (b"name,smiles,status\nEthanol,CCO,lost\n", "not one of"),
    (b"name,smiles\nEthanol," + b"C" * 100_001 + b"\n", "longer than"),
    (b"name,smiles\n" + b"E" * 300 + b",CCO\n", "characters long"),
    (b"name,smiles\nLinalool,CCO\n", "already used"),                          # name of another material
    (b"name,smiles,cas,cas_source\nEthanol,CCO,78-70-6,from memory\n", "already used"),
    (b"name,smiles,structure_source\nEthanol,CCO,literature: my notebook\n", "does not look like a published"),
    # restriction entries (a JSON array in the restrictions column)
    (b"name,smiles,restrictions\nEthanol,CCO,prohibited\n", "not a JSON array"),
    (b'name,smiles,restrictions\nEthanol,CCO,"{""kind"": ""prohibited""}"\n', "must be a list of entries"),
    (b'name,smiles,restrictions\nEthanol,CCO,"[{""kind"": ""banned"", ""authority"": ""x""}]"\n', "is not one of"),
    (b'name,smiles,restrictions\nEthanol,CCO,"[{""kind"": ""prohibited""}]"\n', "needs an authority"),
    (b'name,smiles,restrictions\nEthanol,CCO,"[{""kind"": ""restricted"", ""authority"": ""x"", '
     b'""max_percent"": 150}]"\n', "outside 0-100"),
    (b'name,smiles,restrictions\nEthanol,CCO,"[{""kind"": ""restricted"", ""authority"": ""x"", '
     b'""max_percent"": ""lots""}]"\n', "is not a number"),
    (b'name,smiles,restrictions\nEthanol,CCO,"[{""kind"": ""allergen"", ""authority"": ""x"", '
     b'""date"": ""3 May""}]"\n', "YYYY-MM-DD"),
    (b'name,smiles,restrictions\nEthanol,CCO,"[{""kind"": ""allergen"", ""authority"": ""x"", '
     b'""level"": 1}]"\n', "unknown key"),
    (b'name,smiles,restrictions\nEthanol,CCO,"[{""kind"": ""allergen"", ""authority"": ""x"", '
     b'""source"": ""literature: my notebook""}]"\n', "does not look like a published"),
]

BAD_SDF = [
    (GOOD_MOLFILE.replace("M  END", "") + "$$$$\n", "truncated"),
    ("$$$$\n$$$$\n", "no SDF records"),
    (GOOD_MOLFILE + ">  <price>\n3\n\n$$$$\n", "unknown data item"),
    ("\n\n\n  3  2  0  0  0  0  0  0  0  0999 V2000\nM  END\n$$$$\n", "could not parse the molfile"),
    (GOOD_MOLFILE + ">  <name>\nEthanol\n\n>  <cas>\n64-17-5\n\n$$$$\n", "needs a source"),  # CAS RN, no provenance
    (GOOD_MOLFILE + "$$$$\n", "name is empty"),                                # blank title, no name item
]


# Structures intake refuses: not an odorant olibra can hold.
REFUSED = [
    ("[H][H]", "no heavy atom"),                                  # dihydrogen
    ("[H+]", "no heavy atom"),                                    # a bare proton
    ("[2H][2H]", "no heavy atom"),                                # dideuterium
    ("[O-][O-]", "charged inorganic"),                            # peroxide dianion, not hydrogen peroxide
    ("[NH4+]", "charged inorganic"),
    ("[Na+].[Cl-]", "salt or mixture of inorganic ions"),         # sodium chloride must not become HCl
    ("[NH4+].[Cl-]", "salt or mixture of inorganic ions"),        # ammonium chloride
    ("[K+].[Br-]", "salt or mixture of inorganic ions"),
    ("[Fe+2].c1cc[cH-]c1.c1cc[cH-]c1", "Fe"),                     # ferrocene, written ionically
    ("[Fe]1234C5=C1C2C3=C45", "Fe"),                              # an iron-bonded cyclopentadienyl
    ("C[Mg]Br", "organometallic"),                                # a Grignard reagent
    ("CC[Sn](CC)(CC)CC", "organometallic"),                       # tetraethyltin
    ("[Cu+2].CC(=O)[O-].CC(=O)[O-]", "Cu"),                       # copper(II) acetate
    ("[Zn+2].[O-]C(=O)c1ccccc1.[O-]C(=O)c1ccccc1", "Zn"),
    ("C[Na]", "organometallic"),                                  # a sodium atom bonded to carbon
]
