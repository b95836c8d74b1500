"""Look of the report: page style, shared map patterns and the tooltip script.

Colours are our own: calm paper and ink, soft zone fills (colouring.PALETTE), a dark red
outline plus hatching for rule breaks, and one fill and pattern per kind of change, so
that no signal rests on colour alone.
"""

from __future__ import annotations

import base64
import hashlib

from zonedesign.report.colouring import WARNING, palette

CHANGE_KINDS = ("kept", "merged", "split", "merged-and-split", "reshaped", "new")
KIND_STYLE = {
    # fill, pattern drawn over it; each kind differs in pattern as well as in colour
    "kept": ("#e4e1d9", ""),
    "merged": ("#a9c8e8", '<path d="M0 2h8M0 6h8" stroke="#2f4f6f" stroke-width="1"/>'),
    "split": ("#f2c48d", '<path d="M2 0v8M6 0v8" stroke="#7a4a12" stroke-width="1"/>'),
    "reshaped": ("#b5d6a7", '<circle cx="4" cy="4" r="1.3" fill="#2f5a25"/>'),
    "merged-and-split": ("#9fd4cf", '<path d="M0 2h8M0 6h8M2 0v8M6 0v8" stroke="#245a55" stroke-width="0.8"/>'),
    "new": ("#d9b8e0", '<path d="M0 4h8M4 0v8" stroke="#5a2f66" stroke-width="1"/>'),
    "other": ("#ffffff", '<path d="M0 8L8 0" stroke="#555" stroke-width="0.8"/>'),
}
KIND_WORDS = {
    "kept": "kept: same areas as before",
    "merged": "merged: two or more previous zones joined",
    "split": "split: part of a previous zone",
    "reshaped": "reshaped: a previous zone with areas moved in or out",
    "merged-and-split": "merged-and-split: built from parts of two or more previous zones",
    "new": "new: no previous zone behind it",
    "other": "other",
}


def defs(n_colours: int) -> str:
    """Fill patterns shared by every map: hatching per colour, one pattern per change kind."""
    pats = []
    for i, c in enumerate(palette(n_colours)):
        pats.append(
            f'<pattern id="hatch-{i}" patternUnits="userSpaceOnUse" width="8" height="8" patternTransform="rotate(45)">'
            f'<rect width="8" height="8" fill="{c}"/><path d="M1 0v8" stroke="#4a1712" stroke-width="1.6"/></pattern>'
        )
    for k, (fill, mark) in KIND_STYLE.items():
        pats.append(
            f'<pattern id="kind-{k}" patternUnits="userSpaceOnUse" width="8" height="8">'
            f'<rect width="8" height="8" fill="{fill}"/>{mark}</pattern>'
        )
    return (
        '<svg class="defs" width="0" height="0" aria-hidden="true" focusable="false">'
        f"<defs>{''.join(pats)}</defs></svg>"
    )


def css(n_colours: int) -> str:
    fills = "".join(
        f".f{i}{{fill:{c}}}.h{i}{{fill:url(#hatch-{i})}}" for i, c in enumerate(palette(n_colours))
    )
    kinds = "".join(f".k-{k}{{fill:url(#kind-{k})}}" for k in KIND_STYLE)
    return (
        ":root{--ink:#1f2328;--muted:#4a4f57;--paper:#fbfaf7;--rule:#d9d4ca;--head:#efebe3;--link:#1b4f86}"
        "*{box-sizing:border-box}"
        "body{margin:0;background:var(--paper);color:var(--ink);font:15px/1.5 system-ui,-apple-system,'Segoe UI',"
        "Roboto,'Noto Sans','DejaVu Sans',sans-serif}"
        "header,nav,main{max-width:1120px;margin:0 auto;padding:0 24px}"
        "header{padding-top:20px}h1{font-size:1.6rem;margin:.2em 0 .4em;color:#1d2a36}"
        "h2{font-size:1.3rem;margin:1.8em 0 .5em;padding-bottom:.2em;border-bottom:2px solid var(--rule);color:#1d2a36}"
        "h3{font-size:1.08rem;margin:1.4em 0 .4em;color:#26323d}"
        "a{color:var(--link)}a:focus,summary:focus{outline:2px solid #1b4f86;outline-offset:2px}"
        ".caution{background:#fff4d4;border-left:5px solid #8a6a00;color:#352a00;padding:10px 14px;margin:0 0 12px}"
        ".lede{color:var(--muted);margin:.3em 0 1em}.note{color:#3d3a33;background:#f1eee7;padding:6px 10px;border-radius:3px}"
        "nav ul{list-style:none;padding:0;margin:0 0 8px;display:flex;flex-wrap:wrap;gap:4px 16px;font-size:.92rem}"
        "dl.facts{display:grid;grid-template-columns:max-content 1fr;gap:2px 18px;margin:.5em 0}"
        "dl.facts dt{color:var(--muted)}dl.facts dd{margin:0}"
        ".table-wrap{overflow-x:auto;margin:.6em 0 1em}"
        "table{border-collapse:collapse;font-size:.88rem;background:#fff;min-width:min(100%,30rem)}"
        "caption{text-align:left;font-weight:600;padding:4px 0;color:#26323d}"
        "th,td{border:1px solid var(--rule);padding:3px 8px;text-align:left;vertical-align:top}"
        "thead th{background:var(--head)}tbody th{font-weight:600;background:#f7f5f0}"
        "tbody tr:nth-child(even) td{background:#faf9f6}tr:target td,tr:target th{background:#fff0b8}"
        "pre.rules{background:#fff;border:1px solid var(--rule);padding:10px 14px;overflow-x:auto;font-size:.85rem}"
        "figure{margin:.6em 0 1.2em}figcaption{color:var(--muted);font-size:.88rem}"
        "figure.map{background:#fff;border:1px solid var(--rule);padding:6px}"
        "svg.zonemap{display:block;width:100%;height:auto;max-height:82vh;cursor:grab;touch-action:none}"
        "svg.zonemap:focus{outline:2px solid #1b4f86}"
        "body.wide header,body.wide nav,body.wide main{max-width:1400px;padding:0 16px}"
        ".maps-side{display:grid;grid-template-columns:repeat(auto-fit,minmax(300px,1fr));gap:10px}"
        ".maps-side figure{margin:0}"
        "table.decide{width:100%;table-layout:fixed;font-size:.8rem}"
        "table.decide th,table.decide td{padding:3px 4px;overflow-wrap:anywhere}"
        "table.decide td.num{text-align:right;font-variant-numeric:tabular-nums}"
        "td.best{font-weight:700;background:#e4f1df!important}td.best::before{content:'\\2605 ';color:#1f5f3a}"
        "td.bad{color:#a3241b;font-weight:600}"
        "img.chart.full{width:100%;max-width:1360px}"
        "svg.defs{position:absolute;width:0;height:0;overflow:hidden}"
        ".zone{stroke:#ffffff;stroke-width:.7;vector-effect:non-scaling-stroke;stroke-linejoin:round}"
        ".zone:hover{stroke:#1f2328;stroke-width:2}"
        f".zone.broken{{stroke:{WARNING};stroke-width:2.2}}"
        ".zone:target{stroke:#000;stroke-width:3.5}"
        ".fence{fill:none;stroke:#2b2f33;stroke-width:2.2;vector-effect:non-scaling-stroke;pointer-events:none;stroke-linejoin:round}"
        f"{fills}{kinds}"
        ".legend{list-style:none;padding:0;margin:.4em 0 .8em;display:flex;flex-wrap:wrap;gap:6px 22px;font-size:.88rem}"
        ".legend li{display:flex;align-items:center;gap:6px}svg.swatch{width:30px;height:20px;flex:none}"
        "details{margin:.3em 0;border:1px solid var(--rule);background:#fff;padding:4px 8px}"
        "summary{cursor:pointer;font-weight:600}"
        "img.chart{display:block;max-width:100%;height:auto;margin:.4em 0 1em;background:#fff}"
        "#tip{position:fixed;z-index:10;max-width:340px;background:#fff;color:var(--ink);border:1px solid #5d6167;"
        "border-radius:4px;padding:6px 9px;font-size:.84rem;line-height:1.35;white-space:pre-line;pointer-events:none;"
        "box-shadow:0 2px 8px rgba(0,0,0,.18)}"
        "[hidden]{display:none!important}"
        "@media print{body{background:#fff;font-size:11pt}nav,#tip{display:none}figure,table{break-inside:avoid}"
        "a{color:inherit}svg.zonemap{max-height:none}}"
    )


SCRIPT = """
(function(){
var tip=document.getElementById('tip');
function zoneOf(t){return t&&t.closest?t.closest('.zone'):null;}
function place(x,y){var w=tip.offsetWidth,h=tip.offsetHeight,l=x+14,t=y+14;
if(l+w>innerWidth-6)l=x-w-14;if(t+h>innerHeight-6)t=y-h-14;
tip.style.left=Math.max(4,l)+'px';tip.style.top=Math.max(4,t)+'px';}
function show(z,x,y){var t=z.querySelector('title');
if(t){z.setAttribute('data-tip',t.textContent);z.removeChild(t);}
tip.textContent=z.getAttribute('data-tip')||'';tip.hidden=false;place(x,y);}
function hide(z){tip.hidden=true;
if(z&&z.hasAttribute('data-tip')&&!z.querySelector('title')){
var t=document.createElementNS('http://www.w3.org/2000/svg','title');
t.textContent=z.getAttribute('data-tip');z.appendChild(t);}}
document.addEventListener('mouseover',function(e){var z=zoneOf(e.target);if(z)show(z,e.clientX,e.clientY);});
document.addEventListener('mousemove',function(e){if(!tip.hidden&&zoneOf(e.target))place(e.clientX,e.clientY);});
document.addEventListener('mouseout',function(e){var z=zoneOf(e.target);if(z&&zoneOf(e.relatedTarget)!==z)hide(z);});
function reveal(){var id=location.hash.slice(1);if(!id)return;
var el=document.getElementById(decodeURIComponent(id));if(!el)return;
for(var p=el.parentNode;p;p=p.parentNode){if(p.tagName==='DETAILS')p.open=true;}
el.scrollIntoView({block:'center'});}
addEventListener('hashchange',reveal);reveal();
addEventListener('beforeprint',function(){document.querySelectorAll('details').forEach(function(d){d.open=true;});});
function box(s){var b=s.viewBox.baseVal;return [b.x,b.y,b.width,b.height];}
document.querySelectorAll('svg.zonemap').forEach(function(s){
var home=box(s),grp=s.closest('.linked'),drag=null;s.setAttribute('tabindex','0');
function set(v){(grp?grp.querySelectorAll('svg.zonemap'):[s]).forEach(function(m){
m.setAttribute('viewBox',v.join(' '));});}
function zoom(f,cx,cy){var b=box(s),w=b[2]*f,h=b[3]*f;
if(w>=home[2]){set(home);return;}if(w<home[2]/400)return;
set([cx-(cx-b[0])*f,cy-(cy-b[1])*f,w,h]);}
function at(x,y){var r=s.getBoundingClientRect(),b=box(s),k=Math.max(b[2]/r.width,b[3]/r.height);
return [b[0]+b[2]/2+(x-r.left-r.width/2)*k,b[1]+b[3]/2+(y-r.top-r.height/2)*k,k];}
s.addEventListener('wheel',function(e){e.preventDefault();var p=at(e.clientX,e.clientY);
zoom(e.deltaY<0?0.8:1.25,p[0],p[1]);},{passive:false});
s.addEventListener('pointerdown',function(e){if(e.button===0)drag=[e.clientX,e.clientY];});
addEventListener('pointerup',function(){drag=null;});
s.addEventListener('pointermove',function(e){if(!drag)return;var b=box(s),k=at(0,0)[2];
var dx=(e.clientX-drag[0])*k,dy=(e.clientY-drag[1])*k;drag=[e.clientX,e.clientY];
if(dx||dy)set([b[0]-dx,b[1]-dy,b[2],b[3]]);});
s.addEventListener('dblclick',function(){set(home);});
s.addEventListener('keydown',function(e){var b=box(s),c=[b[0]+b[2]/2,b[1]+b[3]/2],m=b[2]/8;
if(e.key==='+'||e.key==='=')zoom(0.8,c[0],c[1]);else if(e.key==='-')zoom(1.25,c[0],c[1]);
else if(e.key==='0')set(home);else if(e.key==='ArrowLeft')set([b[0]-m,b[1],b[2],b[3]]);
else if(e.key==='ArrowRight')set([b[0]+m,b[1],b[2],b[3]]);else if(e.key==='ArrowUp')set([b[0],b[1]-m,b[2],b[3]]);
else if(e.key==='ArrowDown')set([b[0],b[1]+m,b[2],b[3]]);else return;e.preventDefault();});
});
})();
"""

# the page's content security policy allows this one script by its hash (CSP level 2)
SCRIPT_HASH = "sha256-" + base64.b64encode(hashlib.sha256(SCRIPT.encode("utf-8")).digest()).decode("ascii")
