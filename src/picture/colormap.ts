/**
 * Perceptually uniform colour maps, as published: 256 sRGB entries each, from
 * dark to light, with lightness (CIELAB L*) rising steadily along the map,
 * so equal steps of value look like equal steps of colour, also in grey
 * print and to most readers with a colour-vision deficiency.
 *
 * Source: viridis and inferno by Stéfan van der Walt and Nathaniel Smith,
 * "A Better Default Colormap for Matplotlib", SciPy 2015; the 256-entry
 * tables are those they published (CC0) in matplotlib (_cm_listed.py), here
 * as exported by the npm package scale-color-perceptual 1.1.2 (its
 * hex/viridis.json and hex/inferno.json), which test/picture/colormap.test.ts
 * compares with these tables entry by entry.
 */

/** A colour as [red, green, blue], 0..255. */
export type Rgb = [number, number, number];

/** Missing cells: a neutral grey, outside both maps' colours. */
export const MISSING: Rgb = [150, 150, 150];

/** The maps a picture may use. */
export type MapName = 'viridis' | 'inferno';

/** viridis: 256 entries of six hex digits (RRGGBB). */
const VIRIDIS =
  '44015444025645045745055946075a46085c460a5d460b5e470d60470e61471063471164471365481467481668481769' +
  '48186a481a6c481b6d481c6e481d6f481f70482071482173482374482475482576482677482878482979472a7a472c7a' +
  '472d7b472e7c472f7d46307e46327e46337f463480453581453781453882443983443a83443b84433d84433e85423f85' +
  '4240864241864142874144874045884046883f47883f48893e49893e4a893e4c8a3d4d8a3d4e8a3c4f8a3c508b3b518b' +
  '3b528b3a538b3a548c39558c39568c38588c38598c375a8c375b8d365c8d365d8d355e8d355f8d34608d34618d33628d' +
  '33638d32648e32658e31668e31678e31688e30698e306a8e2f6b8e2f6c8e2e6d8e2e6e8e2e6f8e2d708e2d718e2c718e' +
  '2c728e2c738e2b748e2b758e2a768e2a778e2a788e29798e297a8e297b8e287c8e287d8e277e8e277f8e27808e26818e' +
  '26828e26828e25838e25848e25858e24868e24878e23888e23898e238a8d228b8d228c8d228d8d218e8d218f8d21908d' +
  '21918c20928c20928c20938c1f948c1f958b1f968b1f978b1f988b1f998a1f9a8a1e9b8a1e9c891e9d891f9e891f9f88' +
  '1fa0881fa1881fa1871fa28720a38620a48621a58521a68522a78522a88423a98324aa8325ab8225ac8226ad8127ad81' +
  '28ae8029af7f2ab07f2cb17e2db27d2eb37c2fb47c31b57b32b67a34b67935b77937b87838b9773aba763bbb753dbc74' +
  '3fbc7340bd7242be7144bf7046c06f48c16e4ac16d4cc26c4ec36b50c46a52c56954c56856c66758c7655ac8645cc863' +
  '5ec96260ca6063cb5f65cb5e67cc5c69cd5b6ccd5a6ece5870cf5773d05675d05477d1537ad1517cd2507fd34e81d34d' +
  '84d44b86d54989d5488bd6468ed64590d74393d74195d84098d83e9bd93c9dd93ba0da39a2da37a5db36a8db34aadc32' +
  'addc30b0dd2fb2dd2db5de2bb8de29bade28bddf26c0df25c2df23c5e021c8e020cae11fcde11dd0e11cd2e21bd5e21a' +
  'd8e219dae319dde318dfe318e2e418e5e419e7e419eae51aece51befe51cf1e51df4e61ef6e620f8e621fbe723fde725';

/** inferno: 256 entries of six hex digits (RRGGBB). */
const INFERNO =
  '00000401000501010601010802010a02020c02020e03021004031204031405041706041907051b08051d09061f0a0722' +
  '0b07240c08260d08290e092b10092d110a30120a32140b34150b37160b39180c3c190c3e1b0c411c0c431e0c451f0c48' +
  '210c4a230c4c240c4f260c51280b53290b552b0b572d0b592f0a5b310a5c320a5e340a5f3609613809623909633b0964' +
  '3d09653e0966400a67420a68440a68450a69470b6a490b6a4a0c6b4c0c6b4d0d6c4f0d6c510e6c520e6d540f6d550f6d' +
  '57106e59106e5a116e5c126e5d126e5f136e61136e62146e64156e65156e67166e69166e6a176e6c186e6d186e6f196e' +
  '71196e721a6e741a6e751b6e771c6d781c6d7a1d6d7c1d6d7d1e6d7f1e6c801f6c82206c84206b85216b87216b88226a' +
  '8a226a8c23698d23698f24699025689225689326679526679727669827669a28659b29649d29649f2a63a02a63a22b62' +
  'a32c61a52c60a62d60a82e5fa92e5eab2f5ead305dae305cb0315bb1325ab3325ab43359b63458b73557b93556ba3655' +
  'bc3754bd3853bf3952c03a51c13a50c33b4fc43c4ec63d4dc73e4cc83f4bca404acb4149cc4248ce4347cf4446d04545' +
  'd24644d34743d44842d54a41d74b3fd84c3ed94d3dda4e3cdb503bdd513ade5238df5337e05536e15635e25734e35933' +
  'e45a31e55c30e65d2fe75e2ee8602de9612bea632aeb6429eb6628ec6726ed6925ee6a24ef6c23ef6e21f06f20f1711f' +
  'f1731df2741cf3761bf37819f47918f57b17f57d15f67e14f68013f78212f78410f8850ff8870ef8890cf98b0bf98c0a' +
  'f98e09fa9008fa9207fa9407fb9606fb9706fb9906fb9b06fb9d07fc9f07fca108fca309fca50afca60cfca80dfcaa0f' +
  'fcac11fcae12fcb014fcb216fcb418fbb61afbb81dfbba1ffbbc21fbbe23fac026fac228fac42afac62df9c72ff9c932' +
  'f9cb35f8cd37f8cf3af7d13df7d340f6d543f6d746f5d949f5db4cf4dd4ff4df53f4e156f3e35af3e55df2e661f2e865' +
  'f2ea69f1ec6df1ed71f1ef75f1f179f2f27df2f482f3f586f3f68af4f88ef5f992f6fa96f8fb9af9fc9dfafda1fcffa4';

/** Decode a table of hex entries once (a pure table, built at load). */
function table(hex: string): Uint8Array {
  const out = new Uint8Array(hex.length / 2);
  for (let k = 0; k < out.length; k++) out[k] = Number.parseInt(hex.slice(2 * k, 2 * k + 2), 16);
  return out;
}

const TABLES: Record<MapName, Uint8Array> = { viridis: table(VIRIDIS), inferno: table(INFERNO) };

/** Entries of every map. */
export const MAP_SIZE = 256;

/** Entry k (0..255) of a map. */
export function mapEntry(map: MapName, k: number): Rgb {
  const t = TABLES[map];
  return [t[3 * k], t[3 * k + 1], t[3 * k + 2]];
}

/** The colour of t in [0, 1] (clamped; NaN gives the first entry): the nearest of the 256 entries. */
export function mapColour(map: MapName, t: number): Rgb {
  const k = t > 0 ? Math.min(MAP_SIZE - 1, Math.round(t * (MAP_SIZE - 1))) : 0;
  return mapEntry(map, k);
}
