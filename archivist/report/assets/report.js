(function(){
"use strict";
var svg=document.getElementById("geomap");
var rows=Array.prototype.slice.call(document.querySelectorAll("#findings tbody tr[data-k]"));
var moreRows=Array.prototype.slice.call(document.querySelectorAll("#findings tbody tr.more"));
var bulk=Array.prototype.slice.call(document.querySelectorAll("#geomap .fm path.bulk"));
var markers={},shapes={};
function fmt(v,d){return v.toLocaleString("en-GB",{maximumFractionDigits:d,minimumFractionDigits:d}).replace(/,/g,"\u202f");}
if(svg){
  var d=svg.dataset,full=d.full.split(" ").map(Number),vb=full.slice();
  var x0=+d.x0,y1=+d.y1,kx=+d.kx,minW=+d.minw,bars=JSON.parse(d.bars||"[]"),labelPx=+d.labelPx||12;
  var labelG=svg.querySelector(".labels"),labels=labelG?Array.prototype.slice.call(labelG.querySelectorAll("text")):[];
  var labelFit=labels.map(function(t){return +t.dataset.s;}),shownLabels=0;
  var info=document.getElementById("info"),coords=document.getElementById("coords"),bar=document.getElementById("scalebar");
  var unitNames=JSON.parse(document.getElementById("unit-names").textContent);
  var fids=JSON.parse(document.getElementById("unit-ids").textContent);
  var frings=JSON.parse(document.getElementById("unit-rings").textContent);
  var unitsG=svg.querySelector(".units"),uq=unitsG?unitsG.transform.baseVal.consolidate().matrix.a:1;
  Array.prototype.forEach.call(svg.querySelectorAll(".fm path[data-k]"),function(p){markers[p.dataset.k]=p;});
  Array.prototype.forEach.call(svg.querySelectorAll(".fg path"),function(p){shapes[p.dataset.k]=p;});
  var pending=false;
  function apply(){
    if(pending)return;pending=true;
    requestAnimationFrame(function(){pending=false;
      svg.setAttribute("viewBox",vb.map(function(v){return +v.toFixed(4);}).join(" "));scale();});
  }
  function unitsPerPx(){var r=svg.getBoundingClientRect();return Math.max(vb[2]/Math.max(r.width,1),vb[3]/Math.max(r.height,1));}
  // The scale bars and their lengths come with the page (ground lengths measured on the ellipsoid):
  // show the longest that fits in 130 pixels at this zoom.
  function scale(){
    var u=unitsPerPx(),pick=null;
    for(var i=0;i<bars.length;i++){if(bars[i][0]/u<=130||pick===null)pick=bars[i];}
    if(pick){bar.textContent=pick[1];var sp=document.createElement("span");sp.style.width=(pick[0]/u).toFixed(1)+"px";bar.appendChild(sp);bar.dataset.len=pick[0];}
    showLabels(u);
  }
  // Unit labels stay labelPx pixels high; each shows while it fits in its polygon (data-s: the most
  // local units per pixel at which it does). They come sorted by data-s, largest first.
  function showLabels(u){
    if(!labelG)return;
    labelG.style.fontSize=(labelPx*u)+"px";
    var lo=0,hi=labelFit.length;
    while(lo<hi){var mid=(lo+hi)>>1;if(labelFit[mid]>=u)lo=mid+1;else hi=mid;}
    for(var k=Math.min(lo,shownLabels);k<Math.max(lo,shownLabels);k++)labels[k].classList.toggle("on",k<lo);
    shownLabels=lo;
  }
  function toLocal(e){var pt=svg.createSVGPoint();pt.x=e.clientX;pt.y=e.clientY;return pt.matrixTransform(svg.getScreenCTM().inverse());}
  function zoomAt(cx,cy,f){
    var w=Math.min(full[2]*3,Math.max(vb[2]*f,minW)),k=w/vb[2];
    vb=[cx-(cx-vb[0])*k,cy-(cy-vb[1])*k,w,vb[3]*k];apply();
  }
  function zoomTo(b){
    var r=svg.getBoundingClientRect(),asp=r.height/Math.max(r.width,1);
    var cx=(b[0]+b[2])/2,cy=(b[1]+b[3])/2;
    var w=Math.max(b[2]-b[0],(b[3]-b[1])/asp,minW);  // the box (with its context) comes with the page
    vb=[cx-w/2,cy-w*asp/2,w,w*asp];apply();
  }
  window.archivistZoomTo=zoomTo;
  function reset(){vb=full.slice();apply();}
  svg.addEventListener("wheel",function(e){e.preventDefault();var p=toLocal(e);zoomAt(p.x,p.y,Math.pow(1.0016,e.deltaY*(e.deltaMode?30:1)));},{passive:false});
  var drag=null;
  svg.addEventListener("pointerdown",function(e){if(e.button!==0)return;drag={x:e.clientX,y:e.clientY,vb:vb.slice(),moved:false};svg.setPointerCapture(e.pointerId);});
  svg.addEventListener("pointermove",function(e){
    var p=toLocal(e);coords.textContent=fmt(x0+p.x/kx,kx===1?1:5)+"  "+fmt(y1-p.y,kx===1?1:5);
    if(!drag)return;var dx=e.clientX-drag.x,dy=e.clientY-drag.y;
    if(!drag.moved&&Math.abs(dx)+Math.abs(dy)<4)return;
    drag.moved=true;svg.classList.add("drag");var u=unitsPerPx();
    vb=[drag.vb[0]-dx*u,drag.vb[1]-dy*u,vb[2],vb[3]];apply();});
  svg.addEventListener("pointerup",function(e){var was=drag;drag=null;svg.classList.remove("drag");if(was&&!was.moved)identify(e);});
  svg.addEventListener("dblclick",function(e){var p=toLocal(e);zoomAt(p.x,p.y,0.5);});
  svg.addEventListener("keydown",function(e){
    var c=[vb[0]+vb[2]/2,vb[1]+vb[3]/2],s=vb[2]*0.15;
    if(e.key==="+"||e.key==="=")zoomAt(c[0],c[1],0.67);else if(e.key==="-")zoomAt(c[0],c[1],1.5);
    else if(e.key==="0")reset();else if(e.key==="ArrowLeft"){vb[0]-=s;apply();}else if(e.key==="ArrowRight"){vb[0]+=s;apply();}
    else if(e.key==="ArrowUp"){vb[1]-=s;apply();}else if(e.key==="ArrowDown"){vb[1]+=s;apply();}else return;
    e.preventDefault();});
  document.getElementById("zin").onclick=function(){zoomAt(vb[0]+vb[2]/2,vb[1]+vb[3]/2,0.5);};
  document.getElementById("zout").onclick=function(){zoomAt(vb[0]+vb[2]/2,vb[1]+vb[3]/2,2);};
  document.getElementById("zfull").onclick=reset;
  function identify(e){
    var t=document.elementFromPoint(e.clientX,e.clientY);if(!t)return;
    var g=t.parentNode;
    if(g&&g.classList&&g.classList.contains("fg")){select(t.dataset.k,true);return;}
    if(g&&g.classList&&g.classList.contains("fm")){
      if(t.dataset.k!==undefined)select(t.dataset.k,true);
      else info.textContent=t.dataset.n+" "+t.dataset.rule+" findings not listed one by one (see the table).";
      return;}
    if(t.dataset&&t.dataset.unit!==undefined){
      var p=toLocal(e),u=t.dataset.unit,gi=+t.dataset.g;
      var k=featureAt(t.getAttribute("d"),p.x/uq,p.y/uq,frings[gi]);
      info.textContent="Unit "+u+(unitNames[u]?" \u2014 "+unitNames[u]:"")+(k>=0?"; feature "+fids[gi][k]:"")+".";
    }
  }
  // Which polygon of a unit's path holds the point: ray casting over its rings (even-odd per polygon).
  function featureAt(d,gx,gy,rings){
    var re=/[Mlz]|-?\d+/g,m,cmd="",nums=[],x=0,y=0,sx=0,sy=0,parity=0,feat=0,left=rings?rings[0]:1,open=false;
    function edge(ax,ay,bx,by){if((ay>gy)!==(by>gy)&&gx<(bx-ax)*(gy-ay)/(by-ay)+ax)parity^=1;}
    function close(){if(!open)return false;edge(x,y,sx,sy);open=false;left--;
      if(left===0){if(parity)return true;feat++;parity=0;left=rings?rings[feat]:1;}return false;}
    while((m=re.exec(d))!==null){
      var tok=m[0];
      if(tok==="M"||tok==="l"||tok==="z"){
        if(tok==="z"){if(close())return feat;}
        else if(tok==="M"){if(close())return feat;}
        cmd=tok;nums=[];continue;}
      nums.push(+tok);
      if(nums.length===2){
        if(cmd==="M"){x=sx=nums[0];y=sy=nums[1];open=true;}
        else{var nx=x+nums[0],ny=y+nums[1];edge(x,y,nx,ny);x=nx;y=ny;}
        nums=[];}
    }
    if(close())return feat;
    return -1;
  }
  window.addEventListener("resize",apply);
  apply();
}
function select(k,fromMap){
  rows.forEach(function(r){r.classList.toggle("sel",r.dataset.k===k);});
  Object.keys(markers).forEach(function(m){markers[m].classList.toggle("sel",m===k);});
  var tr=document.querySelector('#findings tbody tr[data-k="'+k+'"]');
  if(tr&&svg){document.getElementById("info").textContent=tr.dataset.rule+": "+tr.querySelector(".msg").textContent;}
  if(fromMap&&tr){tr.scrollIntoView({block:"nearest"});}
}
var tbody=document.querySelector("#findings tbody");
function go(tr){
  if(!tr||!tr.dataset.box||!svg)return;
  select(tr.dataset.k,false);
  window.archivistZoomTo(tr.dataset.box.split(" ").map(Number));
  document.getElementById("mapbox").scrollIntoView({block:"nearest"});
}
if(tbody){
  tbody.addEventListener("click",function(e){if(e.target.closest("a"))return;go(e.target.closest("tr"));});
  tbody.addEventListener("keydown",function(e){if(e.key==="Enter"&&!e.target.closest("a"))go(e.target.closest("tr"));});
}
var fFam=document.getElementById("f-family"),fSev=document.getElementById("f-severity"),fRule=document.getElementById("f-rule"),fText=document.getElementById("f-text"),shown=document.getElementById("shown");
function filter(){
  var fam=fFam.value,sev=fSev.value,rule=fRule.value,txt=fText.value.trim().toLowerCase(),n=0;
  rows.forEach(function(r){
    var ok=(!fam||r.dataset.family===fam)&&(!sev||r.dataset.severity===sev)&&(!rule||r.dataset.rule===rule)&&(!txt||r.textContent.toLowerCase().indexOf(txt)>=0);
    r.hidden=!ok;if(ok)n++;
    var m=markers[r.dataset.k],s=shapes[r.dataset.k];
    if(m)m.classList.toggle("off",!ok);if(s)s.classList.toggle("off",!ok);
  });
  function keep(el,sevs){return (!fam||el.dataset.family===fam)&&(!sev||sevs.indexOf(sev)>=0)&&(!rule||el.dataset.rule===rule)&&!txt;}
  moreRows.forEach(function(r){r.hidden=!keep(r,r.dataset.severities.split(" "));});
  bulk.forEach(function(p){p.classList.toggle("off",!keep(p,[p.dataset.severity]));});
  shown.textContent=n===rows.length?"all "+rows.length+" listed":n+" of "+rows.length+" listed";
}
if(fFam){[fFam,fSev,fRule].forEach(function(s){s.addEventListener("change",filter);});fText.addEventListener("input",filter);filter();}
function openRule(){var h=decodeURIComponent(location.hash.slice(1));if(h.indexOf("rule-")===0){var d=document.getElementById(h);if(d)d.open=true;}}
window.addEventListener("hashchange",openRule);openRule();
var opened=[];
window.addEventListener("beforeprint",function(){opened=[];document.querySelectorAll("details.rule").forEach(function(d){if(!d.open){d.open=true;opened.push(d);}});});
window.addEventListener("afterprint",function(){opened.forEach(function(d){d.open=false;});});
})();
