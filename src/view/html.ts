/**
 * The viewer's one page: plain HTML and CSS; its script is the module
 * rankfield-view.mjs (src/view/page.ts, bundled by scripts/bundle.mjs),
 * which imports the decoder from rankfield-decode.mjs. Nothing is fetched
 * from anywhere but the local server.
 */

/** Escape text for HTML. */
function esc(s: string): string {
  return s.replace(/[&<>"']/g, (c) => `&#${c.charCodeAt(0)};`);
}

/** The page, titled with the archive's name. */
export function viewerPage(label: string): string {
  return `<!doctype html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>${esc(label)} - rankfield view</title>
<link rel="icon" href="data:,">
<style>
  * { box-sizing: border-box; }
  html, body { margin: 0; height: 100%; font: 13px/1.35 system-ui, sans-serif; color: #1d1d1d; background: #fafaf7; }
  body { display: grid; grid-template-rows: auto 1fr auto; }
  header { display: flex; flex-wrap: wrap; gap: 6px 14px; align-items: center; padding: 6px 10px; border-bottom: 1px solid #ccc; background: #fff; }
  header h1 { font-size: 14px; margin: 0 8px 0 0; font-weight: 600; max-width: 40ch; overflow: hidden; text-overflow: ellipsis; white-space: nowrap; }
  header label { display: flex; gap: 4px; align-items: center; }
  button { font: inherit; min-width: 28px; padding: 2px 8px; border: 1px solid #999; border-radius: 3px; background: #f2f2ee; cursor: pointer; }
  button:hover { background: #e6e6e0; }
  select, input { font: inherit; }
  input[type=number] { width: 6em; }
  main { display: grid; grid-template-columns: 1fr 250px; min-height: 0; }
  #stage { position: relative; min-width: 0; min-height: 0; overflow: hidden; background: #f8f8f8; cursor: grab; touch-action: none; }
  #stage.dragging { cursor: grabbing; }
  #field { position: absolute; inset: 0; width: 100%; height: 100%; image-rendering: pixelated; }
  aside { border-left: 1px solid #ccc; padding: 8px 10px; overflow: auto; background: #fff; }
  aside h2 { font-size: 12px; text-transform: uppercase; letter-spacing: .04em; color: #555; margin: 10px 0 4px; }
  #units { font-weight: 600; }
  #bar { display: block; }
  .swatch { display: inline-block; width: 14px; height: 10px; border: 1px solid #555; vertical-align: middle; margin-right: 4px; }
  dl { display: grid; grid-template-columns: auto 1fr; gap: 1px 8px; margin: 0; }
  dt { color: #555; }
  dd { margin: 0; overflow-wrap: anywhere; font-variant-numeric: tabular-nums; }
  footer { padding: 3px 10px; border-top: 1px solid #ccc; background: #fff; color: #444; font-size: 12px; display: flex; justify-content: space-between; gap: 10px; }
  .note { color: #555; font-size: 12px; }
</style>
<script type="module" src="./rankfield-view.mjs"></script>
</head>
<body data-state="starting">
<header>
  <h1 id="title">${esc(label)}</h1>
  <label>variable <select id="var"></select></label>
  <span id="planes" hidden>
    <span id="plane-name">slice</span>
    <button id="prev" title="previous">&#9664;</button>
    <input id="plane" type="number" min="0" value="0">
    <button id="next" title="next">&#9654;</button>
    <span id="plane-of"></span>
  </span>
  <span>
    <button id="zoom-out" title="zoom out (-)">&minus;</button>
    <button id="zoom-in" title="zoom in (+)">+</button>
    <button id="fit" title="whole plane (0)">fit</button>
    <span id="zoom"></span>
  </span>
</header>
<main>
  <div id="stage"><canvas id="field"></canvas></div>
  <aside>
    <h2>Scale</h2>
    <div id="units"></div>
    <canvas id="bar" width="200" height="260"></canvas>
    <div><span class="swatch" style="background: rgb(150,150,150)"></span>missing (NaN, infinite or fill value)</div>
    <div><span class="swatch" style="background: rgb(222,222,222)"></span>not read yet</div>
    <h2>Under the pointer</h2>
    <dl id="probe"><dt>cell</dt><dd>-</dd></dl>
    <h2>Archive</h2>
    <dl id="about"></dl>
    <p class="note">Values are decoded from a lossy archive: each is within the bound above of the original, not the original itself.</p>
  </aside>
</main>
<footer><span id="status">opening the archive...</span><span id="traffic"></span></footer>
</body></html>
`;
}
